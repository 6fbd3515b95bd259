"""Job files with a thermal input other than the temperature, and the ionization models of [ionization].

References: rtrace.io.read_hdf5 called with the same arguments (tests/test_ionization_readers.py ties
it to Snapshot.from_arrays); the ideal-gas law P = (n_H + n_He + n_e) k T with n_H = X rho / m_H and
n_He = Y rho / m_He (m_H = m_p + m_e, m_He = 4.002602 u, the masses rtrace's Composition documents);
P = (gamma - 1) rho e for the internal energy (common practice); on-the-spot photoionization
equilibrium, Q = sum over cells of alpha_B n_e n_HII V (Stromgren 1939; Osterbrock & Ferland 2006,
sec. 2.3), with alpha_B(1e4 K) = 2.59e-13 cm^3 s^-1 (Osterbrock & Ferland 2006, Table 2.1).

The scenario is invented: a warm sphere (1.5e4 .. 1e6 K, thinner) in cool neutral gas, in rough
pressure balance, and one star whose H II region lies inside the grid.
"""

import textwrap
import tomllib

import astropy.constants as const
import astropy.units as u
import h5py
import numpy as np
import pytest
from scenes import warm_sphere_in_cool_gas

from rtrace.errors import ConfigError
from rtrace.io import read_hdf5
from rtrace.physics.ionization import CollisionalEquilibrium, FullyIonized, IonizingSources, SuppliedFraction
from rtrace.run.inputs import build_snapshot, ionization_model
from rtrace.run.job import load_job, parse_job

SHAPE = (18, 20, 19)
CELL_PC = 0.4
X, Y = 0.70, 0.28  # rtrace's default mass fractions
K_B = const.k_B.cgs.value
M_H = (const.m_p + const.m_e).cgs.value
M_HE = 4.002602 * const.u.cgs.value
ALPHA_B_1E4 = 2.59e-13  # cm^3 s^-1 at 1e4 K (Osterbrock & Ferland 2006, Table 2.1)
STAR_PC = (2.5, 2.7, 2.3)
RATE = 1e47  # s^-1: a Stromgren radius of about 2 pc here


def _gas(seed=9):
    return warm_sphere_in_cool_gas(
        SHAPE, CELL_PC, (5.0, 5.6, 5.2), seed, gamma=1.4, he2_max=0.5, he3_max=0.5, hydrogen_fraction=X
    )


@pytest.fixture(scope="module")
def gas():
    return _gas()


@pytest.fixture(scope="module")
def folder(tmp_path_factory, gas):
    path = tmp_path_factory.mktemp("job_ionization")
    with h5py.File(path / "cloud.h5", "w") as h5:
        h5.attrs["cell_size"] = CELL_PC
        h5.attrs["length_unit"] = "pc"
        h5.create_dataset("rho", data=gas["rho"]).attrs["units"] = "g/cm**3"
        h5.create_dataset("P", data=gas["P"] * 0.1).attrs["units"] = "Pa"  # 1 Pa = 10 dyn cm^-2
        h5.create_dataset("T", data=gas["T"]).attrs["units"] = "K"
        h5.create_dataset("e", data=gas["e"]).attrs["units"] = "erg/g"
        h5.create_dataset("ne", data=gas["rho"] / M_H).attrs["units"] = "cm**-3"
        for name in ("x", "he2", "he3"):
            h5.create_dataset(name, data=gas[name])
    return path


JOB = """
[snapshot]
kind = "hdf5"
path = "cloud.h5"
density = "rho"
{snapshot}

[ionization]
{ionization}

[frequencies]
values = ["1 GHz", "10 GHz"]

[[view]]
npix = 8
distance = "1 kpc"
"""

SOURCES = """
model = "sources"
ionized_temperature = "1e4 K"
[[ionization.sources]]
position = ["2.5 pc", "2.7 pc", "2.3 pc"]
rate = "1e47 / s"
"""


def _with(keys, sources=SOURCES):
    """``[ionization]`` keys placed before the ``[[ionization.sources]]`` tables (TOML nests what follows)."""
    head, table = sources.split("[[ionization.sources]]", 1)
    return head + keys + "\n[[ionization.sources]]" + table


def _raw(snapshot='pressure = "P"', ionization='model = "collisional"'):
    return tomllib.loads(JOB.format(snapshot=snapshot, ionization=textwrap.dedent(ionization)))


def _assert_same(snap, ref):
    assert snap.shape == ref.shape == SHAPE
    assert np.array_equal(snap.cell_size, ref.cell_size) and np.array_equal(snap.origin, ref.origin)
    for name in ("_t", "_ne", "_ni"):
        assert getattr(snap, name).dtype == getattr(ref, name).dtype
        assert np.array_equal(getattr(snap, name), getattr(ref, name)), name
    assert snap.checksum() == ref.checksum()
    assert snap.provenance == ref.provenance


def _numbers(rho):
    return X * rho / M_H, Y * rho / M_HE


# -- a job builds what read_hdf5 builds, and the physics holds ------------------------------------


@pytest.mark.parametrize("case", [None, "A", "B"])
def test_collisional_job_with_pressure_equals_read_hdf5(folder, case):
    ionization = 'model = "collisional"' + ("" if case is None else f'\ncase = "{case}"')
    job = parse_job(_raw(ionization=ionization), folder)
    model = ionization_model(job)
    assert isinstance(model, CollisionalEquilibrium) and model.case == (case or "A")
    snap = build_snapshot(job)
    ref = read_hdf5(
        folder / "cloud.h5", density="rho", pressure="P", ionization=CollisionalEquilibrium(case=case or "A")
    )
    _assert_same(snap, ref)
    assert snap.provenance["temperature"].startswith("from the pressure")


def test_pressure_and_collisional_obey_the_ideal_gas_law(folder, gas):
    snap = build_snapshot(parse_job(_raw(), folder))
    n_h, n_he = _numbers(gas["rho"])
    t, n_e = snap._t.astype(float), snap._ne.astype(float)
    # P = (n_H + n_He + n_e) k T in every cell (float32 storage: 1e-6)
    np.testing.assert_allclose((n_h + n_he + n_e) * K_B * t, gas["P"], rtol=1e-6)
    # limits of collisional equilibrium (common practice): neutral below 5e3 K; above 2e5 K, hydrogen
    # and helium stripped (He III above 99%), n_e = n_H + 2 n_He
    cold, hot = t < 5e3, t > 2e5
    assert cold.sum() > 1000 and hot.sum() > 5
    assert np.all(n_e[cold] < 1e-6 * n_h[cold])
    np.testing.assert_allclose(n_e[hot], (n_h + 2 * n_he)[hot], rtol=2e-3)


def test_internal_energy_job_with_gamma(folder, gas):
    job = parse_job(_raw(snapshot='internal_energy = "e"\ngamma = 1.4', ionization='model = "full"'), folder)
    snap = build_snapshot(job)
    _assert_same(snap, read_hdf5(folder / "cloud.h5", density="rho", internal_energy="e", gamma=1.4, ionization="full"))
    assert "gamma = 1.4" in snap.provenance["temperature"]
    # fully ionized hydrogen and singly ionized helium: n = 2 (n_H + n_He), P = (gamma - 1) rho e
    n_h, n_he = _numbers(gas["rho"])
    np.testing.assert_allclose(snap._t, 0.4 * gas["rho"] * gas["e"] / (2 * (n_h + n_he) * K_B), rtol=1e-6)
    np.testing.assert_allclose(snap._ne, n_h + n_he, rtol=1e-6)
    # the default gamma is 5/3, not 1.4
    default = build_snapshot(parse_job(_raw(snapshot='internal_energy = "e"', ionization='model = "full"'), folder))
    np.testing.assert_allclose(default._t, snap._t * (2 / 3) / 0.4, rtol=1e-6)


def test_supplied_helium_fractions_job(folder, gas):
    ionization = 'model = "supplied"\nfraction = "x"\nhelium_ii = "he2"\nhelium_iii = "he3"'
    snap = build_snapshot(parse_job(_raw(snapshot='temperature = "T"', ionization=ionization), folder))
    _assert_same(
        snap,
        read_hdf5(
            folder / "cloud.h5",
            density="rho",
            temperature="T",
            ionization=SuppliedFraction("x", helium_ii="he2", helium_iii="he3"),
        ),
    )
    # n_e = x n_H + (y2 + 2 y3) n_He; ion term = x n_H + (y2 + 4 y3) n_He (Z^2 weights)
    n_h, n_he = _numbers(gas["rho"])
    np.testing.assert_allclose(snap._ne, gas["x"] * n_h + (gas["he2"] + 2 * gas["he3"]) * n_he, rtol=1e-6)
    np.testing.assert_allclose(snap._ni, gas["x"] * n_h + (gas["he2"] + 4 * gas["he3"]) * n_he, rtol=1e-6)


@pytest.mark.parametrize("thermal", ['pressure = "P"', 'temperature = "T"'])
def test_sources_job_equals_read_hdf5_and_balances_the_photons(folder, gas, thermal):
    job = parse_job(_raw(snapshot=thermal, ionization=SOURCES), folder)
    model = ionization_model(job)
    assert isinstance(model, IonizingSources) and model.helium == "single"
    np.testing.assert_allclose(model.positions, [(np.array(STAR_PC) * u.pc).to_value(u.cm)], rtol=1e-15)
    snap = build_snapshot(job)
    kw = {thermal.split(" ")[0]: thermal.split('"')[1]}
    ref = read_hdf5(
        folder / "cloud.h5",
        density="rho",
        **kw,
        ionization=IonizingSources(positions=[STAR_PC] * u.pc, rates=[RATE] / u.s, ionized_temperature=1e4 * u.K),
    )
    _assert_same(snap, ref)
    assert "100% absorbed in the grid" in snap.provenance["photon_budget"]
    # Photoionization equilibrium: the star's photons balance the case-B recombinations of the gas
    # it ionizes, all at the 1e4 K set for it. Photoionized cold gas: n_HII / n_e = n_H / (n_H + n_He).
    n_h, n_he = _numbers(gas["rho"])
    photo = (snap._t == np.float32(1e4)) & ~gas["warm"]
    n_e = snap._ne.astype(float)
    volume = (CELL_PC * u.pc).to_value(u.cm) ** 3
    recombinations = np.sum((ALPHA_B_1E4 * n_e * n_e * n_h / (n_h + n_he))[photo]) * volume
    assert recombinations == pytest.approx(RATE, rel=0.01)
    # the region is centred on the star
    idx = np.indices(SHAPE)
    weight = (n_e**2)[photo]
    centre = [np.sum(idx[i][photo] * weight) / weight.sum() for i in range(3)]
    np.testing.assert_allclose((np.array(centre) + 0.5) * CELL_PC, STAR_PC, atol=0.2)


def test_sources_job_from_a_file(folder):
    text = JOB.format(snapshot='temperature = "T"', ionization=_with('helium = "none"\nrays_per_cell = 8'))
    (folder / "sources.toml").write_text(text)
    job = load_job(folder / "sources.toml")
    model = ionization_model(job)
    assert model.helium == "none" and model.rays_per_cell == 8.0 and model.ionized_temperature == 1e4
    ref = read_hdf5(
        folder / "cloud.h5",
        density="rho",
        temperature="T",
        ionization=IonizingSources(
            positions=[STAR_PC] * u.pc,
            rates=[RATE] / u.s,
            helium="none",
            ionized_temperature=1e4 * u.K,
            rays_per_cell=8.0,
        ),
    )
    _assert_same(build_snapshot(job), ref)


def test_full_and_composition_from_the_job(folder):
    ionization = 'model = "full"\nhelium = "double"\nhydrogen_mass_fraction = 0.75\nhelium_mass_fraction = 0.25'
    job = parse_job(_raw(ionization=ionization), folder)
    model = ionization_model(job)
    assert isinstance(model, FullyIonized)
    assert (model.composition.hydrogen, model.composition.helium) == (0.75, 0.25)


# -- errors when the job is parsed, before any field is read ---------------------------------------

OUTSIDE = SOURCES.replace('["2.5 pc", "2.7 pc", "2.3 pc"]', '["2.5 pc", "8.0 pc", "2.3 pc"]')


def test_sources_outside_the_grid_when_the_job_is_parsed(folder, monkeypatch):
    import rtrace.io.hdf5

    # y: 20 cells of 0.4 pc end at 8 pc, and the upper face is outside the grid
    message = r"\[ionization\].sources: positions: 1 of 1 sources lie outside the grid .*cloud.h5"

    def no_read(*args, **kwargs):
        raise AssertionError("a field was read before the sources were checked")

    monkeypatch.setattr(rtrace.io.hdf5, "read_hdf5", no_read)
    monkeypatch.setattr(h5py.Dataset, "__getitem__", no_read)
    with pytest.raises(ConfigError, match=message):
        parse_job(_raw(ionization=OUTSIDE), folder)
    (folder / "outside.toml").write_text(JOB.format(snapshot='pressure = "P"', ionization=OUTSIDE))
    with pytest.raises(ConfigError, match=message):
        load_job(folder / "outside.toml")
    # allowed on request
    parse_job(_raw(ionization=_with("allow_outside = true", OUTSIDE)), folder)


def test_sources_outside_a_subvolume(folder):
    snapshot = 'temperature = "T"\nsubvolume = [[0, 18], [0, 10], [0, 19]]'
    with pytest.raises(ConfigError, match=r"\[ionization\].sources: positions: 1 of 1 sources lie outside"):
        parse_job(_raw(snapshot=snapshot, ionization=SOURCES.replace('"2.7 pc"', '"4.5 pc"')), folder)
    parse_job(_raw(snapshot=snapshot, ionization=SOURCES), folder)


@pytest.mark.parametrize(
    "snapshot,ionization,message",
    [
        # thermal inputs
        (
            'temperature = "T"\ngamma = 1.4',
            'model = "full"',
            r"\[snapshot\].gamma: only used with 'pressure' or "
            r"'internal_energy'",
        ),
        ('pressure = "P"\ngamma = 1.0', 'model = "full"', r"\[snapshot\].gamma: the adiabatic index must be > 1"),
        ('pressure = "P"\ngamma = "1.4"', 'model = "full"', r"\[snapshot\].gamma: expected float"),
        (
            'pressure = "P"\ntemperature = "T"',
            'model = "full"',
            r"give exactly one of 'temperature', 'pressure' or 'internal_energy' .*\(got 'temperature', 'pressure'\)",
        ),
        ('pressure = "P"\ninternal_energy = "e"', 'model = "full"', r"\(got 'pressure', 'internal_energy'\)"),
        # keys that belong to another model
        (
            'pressure = "P"',
            'model = "full"\ncase = "B"',
            r"\[ionization\].case: not used by model = 'full' \(it belongs to 'collisional'\)",
        ),
        (
            'pressure = "P"',
            'model = "collisional"\nhelium = "single"',
            r"\[ionization\].helium: not used by model = "
            r"'collisional'",
        ),
        (
            'pressure = "P"',
            'model = "collisional"\nionized_temperature = "1e4 K"',
            r"\[ionization\].ionized_temperature: not used by model = 'collisional' \(it belongs to 'sources'\)",
        ),
        ('pressure = "P"', 'model = "saha"\nfraction = "x"', r"\[ionization\].fraction: not used by model = 'saha'"),
        (
            'pressure = "P"',
            'model = "supplied"\nfraction = "x"\nsources = []',
            r"\[ionization\].sources: not used by model = 'supplied'",
        ),
        ('pressure = "P"', 'model = "collisional"\ncase = "C"', r"\[ionization\].case: 'C' is not 'A' or 'B'"),
        (
            'pressure = "P"',
            'model = "colisional"',
            r"\[ionization\].model: 'colisional' \(did you mean 'collisional'\?\)",
        ),
        # helium choices per model
        (
            'pressure = "P"',
            'model = "full"\nhelium = "none"',
            r"\[ionization\].helium: 'none' is not valid for model = 'full'; choose one of single, double",
        ),
        (
            'pressure = "P"',
            _with('helium = "double"'),
            r"\[ionization\].helium: 'double' is not valid for model = 'sources'; choose one of single, none",
        ),
        (
            'pressure = "P"',
            'model = "supplied"\nfraction = "x"\nhelium = "triple"',
            r"'triple' is not valid for model = 'supplied'",
        ),
        (
            'pressure = "P"',
            'model = "supplied"\nfraction = "x"\nhelium_ii = "he2"\nhelium = "single"',
            r"\[ionization\].helium: not used when 'helium_ii' / 'helium_iii' datasets are given",
        ),
        ('pressure = "P"', 'model = "supplied"\nhelium_ii = "he2"', r"model = 'supplied' needs 'fraction'"),
        # sources
        ('pressure = "P"', 'model = "sources"', r"model = 'sources' needs 'sources'"),
        (
            'pressure = "P"',
            SOURCES.replace('rate = "1e47 / s"\n', ""),
            r"\[ionization\].sources\[0\]: 'rate' is required",
        ),
        (
            'pressure = "P"',
            SOURCES.replace('position = ["2.5 pc", "2.7 pc", "2.3 pc"]\n', ""),
            r"\[ionization\].sources\[0\]: 'position' is required",
        ),
        (
            'pressure = "P"',
            SOURCES.replace('"1e47 / s"', '"-1e47 / s"'),
            r"\[ionization\].sources\[0\].rate: must be finite and >= 0, got '-1e47 / s'",
        ),
        ('pressure = "P"', SOURCES.replace('"1e47 / s"', '"1e47 K"'), r"sources\[0\].rate: '1e47 K' is not a rate"),
        ('pressure = "P"', SOURCES.replace('"1e47 / s"', '"1e47"'), r"sources\[0\].rate: '1e47' has no unit"),
        (
            'pressure = "P"',
            SOURCES.replace('["2.5 pc", "2.7 pc", "2.3 pc"]', '["2.5 pc", "2.7 pc"]'),
            r"sources\[0\].position: expected a list of three lengths",
        ),
        (
            'pressure = "P"',
            SOURCES.replace("rate =", "rates ="),
            r"sources\[0\]: unknown key 'rates' \(did you "
            r"mean 'rate'\?\)",
        ),
        (
            'pressure = "P"',
            SOURCES.replace('"1e4 K"', '"-5 K"'),
            r"\[ionization\].ionized_temperature: must be a positive temperature",
        ),
        ('pressure = "P"', _with("rays_per_cell = 100"), r"rays_per_cell: expected a number from 4 to 64"),
    ],
)
def test_ionization_errors(folder, snapshot, ionization, message):
    with pytest.raises(ConfigError, match=message):
        parse_job(_raw(snapshot=snapshot, ionization=ionization), folder)


def test_sources_with_electron_density(folder):
    text = JOB.replace('density = "rho"', 'electron_density = "ne"').format(
        snapshot='temperature = "T"', ionization=SOURCES
    )
    with pytest.raises(ConfigError, match=r"\[ionization\]: only used with \[snapshot\].density"):
        parse_job(tomllib.loads(text), folder)
    text = JOB.replace('density = "rho"', 'electron_density = "ne"').format(
        snapshot='pressure = "P"', ionization='model = "full"'
    )
    with pytest.raises(ConfigError, match=r"\[snapshot\].pressure: needs 'density'"):
        parse_job(tomllib.loads(text), folder)
