"""Photoionization by point sources (rtrace.physics.ionization.IonizingSources).

References: the Strömgren (1939, ApJ 89, 526) sphere in the on-the-spot
approximation, Q = (4 pi / 3) R_S^3 n_e n_H alpha_B (Osterbrock & Ferland
2006, eq. 2.19); photon conservation (every ionizing photon balances one
recombination to an excited level: total alpha_B sum n_e n_HII V = Q); the
case-B recombination coefficient of Hui & Gnedin (1997, MNRAS 292, 27),
evaluated here independently, and its tabulated value alpha_B(1e4 K) =
2.59e-13 cm^3 s^-1 (Osterbrock & Ferland 2006, table 2.1, from memory);
the thin free-free emissivity of Rybicki & Lightman (1979, eq. 5.14b).
"""

import warnings

import astropy.constants as const
import astropy.units as u
import numpy as np
import pytest
import scipy.constants as sc

import rtrace
from rtrace.errors import InputError, PhysicsRangeWarning
from rtrace.physics import gaunt_factor
from rtrace.physics.ionization import Composition, IonizingSources

PURE_H = Composition(hydrogen=1.0, helium=0.0)
M_H = (sc.m_p + sc.m_e) * 1e3  # g, hydrogen atom (scipy CODATA)
M_HE = 4.002602 * sc.atomic_mass * 1e3  # g (standard atomic weight, from memory)
PC = u.pc.to(u.cm)


def alpha_b(T):
    """Case-B recombination coefficient of H II, Hui & Gnedin (1997) appendix A (from memory)."""
    lam = 2.0 * 157807.0 / np.asarray(T, float)
    return 2.753e-14 * lam**1.500 / (1.0 + (lam / 2.740) ** 0.407) ** 2.242


def stromgren_radius(Q, n_h, n_e, T):
    """R_S [cm] from Q = (4 pi / 3) R^3 n_e n_H alpha_B (Osterbrock & Ferland 2006, eq. 2.19)."""
    return (3.0 * Q / (4.0 * np.pi * n_h * n_e * alpha_b(T))) ** (1.0 / 3.0)


def uniform(n, box_pc=4.0, n_h=100.0, T=1e4, comp=PURE_H):
    rho = np.full((n, n, n), n_h * M_H / comp.hydrogen)
    return rho, np.full((n, n, n), T), box_pc / n


def build(rho, T, dx_pc, model, **kw):
    return rtrace.Snapshot.from_arrays(
        temperature=T * u.K,
        cell_size=dx_pc * u.pc,
        density=rho * u.g / u.cm**3,
        ionization=model,
        dtype=np.float64,
        **kw,
    )


def recombinations(snap, T=None):
    """alpha_B sum n_e n_HII V for pure hydrogen (n_HII = n_e = ion term) [s^-1]."""
    ne = snap.electron_density.value
    t = snap.temperature.value if T is None else T
    return float(np.sum(alpha_b(t) * ne * snap.ion_density.value) * np.prod(snap.cell_size))


def test_case_b_coefficient_against_its_table_value():
    # Osterbrock & Ferland (2006), table 2.1 (from memory): alpha_B(1e4 K) = 2.59e-13 cm^3 s^-1.
    from rtrace.physics.ionization.tables import case_b_coefficient

    assert alpha_b(1e4) == pytest.approx(2.59e-13, rel=5e-3)
    T = np.geomspace(3e3, 1e7, 40)
    np.testing.assert_allclose(case_b_coefficient(T), alpha_b(T), rtol=1e-6)


@pytest.mark.parametrize("n", [24, 32, 48])
def test_stromgren_sphere_volume(n):
    # Strömgren (1939); Osterbrock & Ferland (2006), eq. 2.19. R_S = 1.46 pc = 8.8, 11.7 and 17.6 cells.
    Q = 1e48
    rho, T, dx = uniform(n)
    src = IonizingSources(positions=[[2.0, 2.0, 2.0]] * u.pc, rates=[Q] / u.s, composition=PURE_H)
    snap = build(rho, T, dx, src)
    r_s = stromgren_radius(Q, 100.0, 100.0, 1e4)
    x = snap.electron_density.value / 100.0
    # The ionized volume as free-free emission and recombinations see it: a cell at the front with
    # ionized fraction x stands for the ionized part x^2 of its volume (ne n_i ~ x^2).
    volume = np.sum(x**2) * (dx * PC) ** 3
    # Photons are paid cell by cell, so the volume is exact at any resolution but for float32 storage
    # (measured 1.1e-5 at all three).
    error = volume / (4.0 / 3.0 * np.pi * r_s**3) - 1.0
    assert abs(error) < 1e-4, (n, error)
    # the radial profile: ionized inside R_S, neutral outside, the front within a few cells of R_S
    centre = np.array([2.0, 2.0, 2.0]) * PC
    edges = (np.arange(n) + 0.5) * dx * PC
    X, Y, Z = np.meshgrid(edges, edges, edges, indexing="ij")
    r = np.sqrt((X - centre[0]) ** 2 + (Y - centre[1]) ** 2 + (Z - centre[2]) ** 2)
    inside = x[r < r_s - 1.8 * dx * PC]
    assert np.count_nonzero(inside > 0.999) >= 0.999 * inside.size and inside.min() > 0.7
    assert np.all(x[r < r_s - 3.0 * dx * PC] > 0.999)
    assert np.all(x[r > r_s + 1.8 * dx * PC] < 0.01)  # collisional equilibrium at 1e4 K: x = 1.7e-3
    assert "100% absorbed" in snap.provenance["photon_budget"]


@pytest.mark.parametrize("sigma", [0.0, 1.0])
def test_photon_conservation(sigma):
    # Every photon balances one recombination (on-the-spot approximation, Osterbrock & Ferland 2006, sec. 2.3):
    # alpha_B sum n_e n_HII V = Q, in uniform gas and in a lognormal field with sigma = 1 in ln n from cell
    # to cell (strongly non-uniform: densities spread over a factor ~50).
    rng = np.random.default_rng(5)
    n = 40
    n_h = 100.0 * np.exp(sigma * rng.standard_normal((n, n, n)))
    rho = n_h * M_H
    T = np.full(n_h.shape, 1e4)
    Q = 3e47
    src = IonizingSources(positions=[[2.03, 1.97, 2.01]] * u.pc, rates=[Q] / u.s, composition=PURE_H)
    snap = build(rho, T, 4.0 / n, src)
    assert "100% absorbed" in snap.provenance["photon_budget"]
    # subtract what collisional equilibrium alone ionizes at 1e4 K (x = 1.7e-3), outside the region
    neutral = build(rho, T, 4.0 / n, "collisional")
    photo = recombinations(snap) - recombinations(neutral)
    assert photo / Q == pytest.approx(1.0, abs=1e-3)  # measured: 1e-5 (float32 storage)


def test_dense_clump_casts_a_shadow():
    # A clump 100 times denser than its surroundings, between the star and part of the would-be
    # Strömgren sphere, absorbs its rays' photons: the gas behind it stays neutral (common practice).
    n = 40
    rho, T, dx = uniform(n)
    c = (np.arange(n) + 0.5) * dx
    X, Y, Z = np.meshgrid(c, c, c, indexing="ij")
    clump = (X - 2.5) ** 2 + (Y - 2.0) ** 2 + (Z - 2.0) ** 2 < 0.2**2
    rho[clump] *= 100.0
    src = IonizingSources(positions=[[2.0, 2.0, 2.0]] * u.pc, rates=[1e48] / u.s, composition=PURE_H)
    x = build(rho, T, dx, src).electron_density.value / rho * M_H
    at = lambda px, py, pz: x[int(px / dx), int(py / dx), int(pz / dx)]  # noqa: E731
    assert at(3.1, 2.0, 2.0) < 0.01  # behind the clump, 1.1 pc from the star (R_S = 1.46 pc)
    assert at(0.9, 2.0, 2.0) > 0.999  # the same distance on the other side
    assert at(2.0, 3.1, 2.0) > 0.999  # and sideways
    assert at(3.1, 2.0 + 0.8, 2.0) > 0.999  # outside the shadow's cone (half-angle asin(0.2/0.5) = 24 deg)


def test_two_distant_sources_make_two_equal_spheres():
    n_x, n = 72, 24
    dx = 6.0 / n_x * 2 / 2
    rho = np.full((n_x, n, n), 100.0 * M_H)
    T = np.full(rho.shape, 1e4)
    dx = 0.1  # pc: the box is 7.2 x 2.4 x 2.4 pc
    src = IonizingSources(
        positions=[[1.8, 1.2, 1.2], [5.4, 1.2, 1.2]] * u.pc, rates=[3e47, 3e47] / u.s, composition=PURE_H
    )
    x = build(rho, T, dx, src).electron_density.value / 100.0
    left, right = np.sum(x[: n_x // 2] ** 2), np.sum(x[n_x // 2 :] ** 2)
    assert left / right == pytest.approx(1.0, abs=0.005)
    expected = 4 / 3 * np.pi * stromgren_radius(3e47, 100, 100, 1e4) ** 3 / (dx * PC) ** 3
    assert left / expected == pytest.approx(1.0, abs=0.015)


def test_overlapping_sources_count_each_photon_once():
    # Two stars 1 pc apart with Strömgren radii of 1.0 pc each: the merged region holds the photons of
    # both, Q1 + Q2 = alpha_B n^2 V (no recombination paid twice, none left unpaid).
    rho, T, dx = uniform(40)
    Q = 3e47
    src = IonizingSources(
        positions=[[1.5, 2.0, 2.0], [2.5, 2.0, 2.0]] * u.pc, rates=[Q, 0.7 * Q] / u.s, composition=PURE_H
    )
    snap = build(rho, T, dx, src)
    neutral = build(rho, T, dx, "collisional")
    assert (recombinations(snap) - recombinations(neutral)) / (1.7 * Q) == pytest.approx(1.0, abs=1e-3)


def test_thin_flux_of_a_stromgren_sphere():
    # Optically thin free-free flux of an ionization-bounded region: S = j_nu V / D^2 with
    # n_e n_p V = Q / alpha_B, and 4 pi j_nu = 6.84e-38 T^-1/2 n_e n_i e^{-h nu/kT} g_ff
    # (Rybicki & Lightman 1979, eq. 5.14b; the prefactor computed here from CODATA constants).
    # The same relation between the thermal radio flux and Q underlies Condon & Ransom (2016), eq. 4.62.
    rho, T, dx = uniform(32)
    Q, D, nu = 1e48, 1.0 * u.kpc, 30.0 * u.GHz
    src = IonizingSources(positions=[[2.0, 2.0, 2.0]] * u.pc, rates=[Q] / u.s, composition=PURE_H)
    snap = build(rho, T, dx, src)
    view = rtrace.View(los=(0, 0, 1), north=(0, 1, 0), npix=64, width=4.0 * u.pc, distance=D)
    res = rtrace.trace(snap, view, [nu.value] * nu.unit)
    assert float(res.tau.max()) < 1e-3
    e, m_e, c, k, h = (
        const.e.gauss.value,
        const.m_e.cgs.value,
        const.c.cgs.value,
        const.k_B.cgs.value,
        const.h.cgs.value,
    )
    prefactor = 2**5 * np.pi * e**6 / (3 * m_e * c**3) * np.sqrt(2 * np.pi / (3 * k * m_e))
    assert prefactor == pytest.approx(6.84e-38, rel=2e-3)
    g = float(gaunt_factor(nu, 1e4 * u.K))  # exact thermal average (tests/test_gaunt.py)
    # Draine (2011), eq. 10.9 (from memory): an interpolation good to ~1% in the radio
    g_draine = np.log(np.exp(5.960 - np.sqrt(3) / np.pi * np.log(nu.to_value(u.GHz))) + np.e)
    assert g == pytest.approx(g_draine, rel=0.02)
    j_per_ne_ni = prefactor / (4 * np.pi) / np.sqrt(1e4) * np.exp(-h * nu.to_value(u.Hz) / (k * 1e4)) * g
    emission_volume = Q / alpha_b(1e4)  # n_e n_p V, cm^-3
    expected = j_per_ne_ni * emission_volume / D.to_value(u.cm) ** 2 * 1e23 * 4 * np.pi / (4 * np.pi)
    flux = float(res.flux_density()[0].to_value(u.Jy))
    # collisional ionization at 1e4 K adds (1.7e-3)^2 of n^2 outside the sphere: negligible
    assert flux == pytest.approx(expected, rel=0.01)


def test_ionized_temperature_for_a_run_without_photoheating():
    rho, T, dx = uniform(24, T=100.0)
    src = IonizingSources(
        positions=[[2.0, 2.0, 2.0]] * u.pc, rates=[1e48] / u.s, composition=PURE_H, ionized_temperature=1e4 * u.K
    )
    snap = build(rho, T, dx, src)
    x = snap.electron_density.value / 100.0
    t_e = snap.temperature.value
    assert np.all(t_e[x > 0.5] == 1e4) and np.all(t_e[x == 0] == 100.0)
    # alpha_B is taken at 1e4 K: the same sphere as warm gas
    np.testing.assert_allclose(
        snap.electron_density.value,
        build(
            *uniform(24), IonizingSources(positions=[[2.0, 2.0, 2.0]] * u.pc, rates=[1e48] / u.s, composition=PURE_H)
        ).electron_density.value,
        atol=0.2,
    )
    plain = IonizingSources(positions=[[2.0, 2.0, 2.0]] * u.pc, rates=[1e48] / u.s, composition=PURE_H)
    with pytest.warns(PhysicsRangeWarning, match="colder than 5000 K.*ionized_temperature"):
        build(rho, T, dx, plain)


def test_hot_gas_stays_ionized_and_helium_follows_hydrogen():
    comp = Composition()  # X = 0.70, Y = 0.28
    rho, T, dx = uniform(32, n_h=30.0, comp=comp)
    c = (np.arange(32) + 0.5) * dx
    X, Y, Z = np.meshgrid(c, c, c, indexing="ij")
    bubble = (X - 3.4) ** 2 + (Y - 3.4) ** 2 + (Z - 3.4) ** 2 < 0.4**2
    T[bubble] = 1e6
    src = IonizingSources(positions=[[1.0, 1.0, 1.0]] * u.pc, rates=[1e47] / u.s)  # R_S ~ 1 pc
    snap = build(rho, T, dx, src)
    n_h = comp.hydrogen * rho / M_H
    n_he = comp.helium * rho / M_HE
    ne, ni = snap.electron_density.value, snap.ion_density.value
    # collisional equilibrium at 1e6 K: H II and He III (n_e = n_H + 2 n_He, ion term n_H + 4 n_He)
    np.testing.assert_allclose(ne[bubble], (n_h + 2 * n_he)[bubble], rtol=1e-4)
    np.testing.assert_allclose(ni[bubble], (n_h + 4 * n_he)[bubble], rtol=1e-4)
    # photoionized gas: H II and He II (one electron per helium atom, Z = 1)
    i = int(1.0 / dx)
    assert ne[i, i, i] == pytest.approx(n_h[i, i, i] + n_he[i, i, i], rel=1e-6)
    assert ni[i, i, i] == pytest.approx(n_h[i, i, i] + n_he[i, i, i], rel=1e-6)
    none = IonizingSources(positions=[[1.0, 1.0, 1.0]] * u.pc, rates=[1e47] / u.s, helium="none")
    ne_none = build(rho, T, dx, none).electron_density.value
    assert ne_none[i, i, i] == pytest.approx(n_h[i, i, i], rel=1e-3)


def test_temperature_from_pressure_with_sources():
    # A run that heated its HII region: inside R_S(1e4 K) the pressure is that of ionized hydrogen at
    # 1e4 K, 2 n k T; outside, neutral gas at 100 K, n k T. Deriving T with the neutral particle count
    # would make the region 2e4 K; photoionized gas takes the temperature of ionized gas at its pressure.
    n, Q = 32, 1e48
    rho, _, dx = uniform(n)
    r_s = stromgren_radius(Q, 100, 100, 1e4) / PC
    c = (np.arange(n) + 0.5) * dx
    X, Y, Z = np.meshgrid(c, c, c, indexing="ij")
    r = np.sqrt((X - 2) ** 2 + (Y - 2) ** 2 + (Z - 2) ** 2)
    k = sc.k * 1e7
    # the heated region reaches 1.5 cells past R_S, so the front lies in 1e4 K gas
    pressure = np.where(r < r_s + 1.5 * dx, 2 * 100.0 * k * 1e4, 100.0 * k * 100.0)
    src = IonizingSources(positions=[[2.0, 2.0, 2.0]] * u.pc, rates=[Q] / u.s, composition=PURE_H)
    snap = rtrace.Snapshot.from_arrays(
        pressure=pressure * u.dyn / u.cm**2,
        cell_size=dx * u.pc,
        density=rho * u.g / u.cm**3,
        ionization=src,
        dtype=np.float64,
    )
    t = snap.temperature.value
    inner = r < r_s - 2 * dx
    np.testing.assert_allclose(t[inner], 1e4, rtol=1e-3)
    np.testing.assert_allclose(t[r > r_s + 2 * dx], 100.0, rtol=1e-6)
    # Photons balance the recombinations, at each cell's own temperature, of the cells that photons
    # ionized (those more ionized than collisional equilibrium alone makes them at the same pressure; the
    # warm ring just outside R_S is partly collisionally ionized, and pays no photons).
    collisional = rtrace.Snapshot.from_arrays(
        pressure=pressure * u.dyn / u.cm**2,
        cell_size=dx * u.pc,
        density=rho * u.g / u.cm**3,
        ionization="collisional",
        dtype=np.float64,
    )
    lit = snap.electron_density.value > collisional.electron_density.value * (1 + 1e-9) + 1e-12
    ne = snap.electron_density.value
    balance = np.sum((alpha_b(t) * ne * snap.ion_density.value)[lit]) * (dx * PC) ** 3
    assert balance / Q == pytest.approx(1.0, abs=0.01)


def test_source_outside_the_grid():
    rho, T, dx = uniform(24)
    outside = IonizingSources(positions=[[-0.3, 2.0, 2.0]] * u.pc, rates=[1e48] / u.s, composition=PURE_H)
    with pytest.raises(InputError, match=r"positions: 1 of 1 sources lie outside the grid.*allow_outside=True"):
        build(rho, T, dx, outside)
    allowed = IonizingSources(
        positions=[[-0.3, 2.0, 2.0]] * u.pc, rates=[1e48] / u.s, composition=PURE_H, allow_outside=True
    )
    snap = build(rho, T, dx, allowed)
    x = snap.electron_density.value / 100.0
    assert x[0, 12, 12] > 0.999 and x[-1, 12, 12] < 0.01  # the near face is lit, the far side not
    budget = snap.provenance["photon_budget"]
    missed = float(budget.split("left it, ")[1].split("%")[0]) / 100
    # The 4 pc x 4 pc face seen from 0.3 pc on its axis subtends 4 arcsin(ab / sqrt((a^2 + d^2)(b^2 + d^2)))
    # with a = b = 2 pc, d = 0.3 pc (the solid angle of a rectangle from a point on its axis, common geometry);
    # the rest of the photons never reach the grid.
    a, d = 2.0, 0.3
    omega = 4 * np.arcsin(a * a / (a * a + d * d))
    assert missed == pytest.approx(1 - omega / (4 * np.pi), abs=0.002)


@pytest.mark.parametrize(
    "kwargs, message",
    [
        (dict(positions=[[1, 2, 3]] * u.pc, rates=[-1.0] / u.s), r"rates: 1 of 1 rates are negative or not finite"),
        (dict(positions=[[1, 2, 3]] * u.pc, rates=[np.nan] / u.s), r"rates: 1 of 1 rates are negative"),
        (dict(positions=[[1, 2, 3]], rates=[1e48] / u.s), r"positions: expected lengths as an astropy Quantity"),
        (dict(positions=[[1, 2, 3]] * u.K, rates=[1e48] / u.s), r"positions: expected lengths, got unit 'K'"),
        (dict(positions=[[1, 2]] * u.pc, rates=[1e48] / u.s), r"positions: expected shape \(n, 3\)"),
        (dict(positions=[[1, 2, 3]] * u.pc, rates=[1e48, 1e48] / u.s), r"rates: 2 rate\(s\) for 1 source"),
        (dict(positions=[[1, 2, 3]] * u.pc, rates=[1e48] * u.m), r"rates: expected photon rates"),
        (
            dict(positions=[[1, 2, 3]] * u.pc, rates=[1e48] / u.s, ionized_temperature=-5 * u.K),
            r"ionized_temperature: expected one finite temperature > 0 K",
        ),
        (dict(positions=[[1, 2, 3]] * u.pc, rates=[1e48] / u.s, helium="double"), r"helium: 'double' is not valid"),
    ],
)
def test_bad_sources_are_named(kwargs, message):
    with pytest.raises(InputError, match=message):
        IonizingSources(**kwargs)


def test_sources_need_mass_density():
    src = IonizingSources(positions=[[1, 1, 1]] * u.pc, rates=[1e48] / u.s)
    with pytest.raises(InputError, match="ionization: only used with density"):
        rtrace.Snapshot.from_arrays(
            temperature=np.full((4, 4, 4), 1e4) * u.K,
            cell_size=0.5 * u.pc,
            electron_density=np.ones((4, 4, 4)) / u.cm**3,
            ionization=src,
        )


def test_source_checks_come_before_the_work(monkeypatch):
    # Common practice (and DEVELOPERS.md): a mistake in the sources is found before any ray is cast.
    from rtrace.physics.ionization import sources

    calls = []
    monkeypatch.setattr(sources, "cast_source", lambda *a: calls.append(1))
    rho, T, dx = uniform(8)
    with pytest.raises(InputError, match="outside the grid"):
        build(rho, T, dx, IonizingSources(positions=[[5, 1, 1]] * u.pc, rates=[1e48] / u.s))
    assert not calls


def test_no_warning_for_warm_gas():
    rho, T, dx = uniform(16)
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        build(rho, T, dx, IonizingSources(positions=[[2, 2, 2]] * u.pc, rates=[1e47] / u.s))
