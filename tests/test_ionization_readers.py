"""Thermal inputs and ionization models through the readers: HDF5 (eager and file-backed) and yt.

Reference: rtrace.Snapshot.from_arrays on the same arrays, whose physics
(ionization models, temperature from the pressure or internal energy) has
its own tests (tests/test_ionization.py, tests/test_snapshot.py). A reader
must give the same numbers bit for bit, the same checksum, the same
provenance and the same errors; a file-backed snapshot (rtrace.open_hdf5)
must hold what rtrace.io.read_hdf5 reads and trace to the same images.

The scenario is invented: cool neutral gas with a hot sphere in rough
pressure balance, fraction fields drawn at random, and one star whose H II
region lies well inside the grid.
"""

import astropy.units as u
import h5py
import numpy as np
import pytest
from scenes import M_H, warm_sphere_in_cool_gas

import rtrace
from rtrace.errors import InputError
from rtrace.io import lazy, read_hdf5
from rtrace.io.lazy import open_hdf5
from rtrace.physics.ionization import CollisionalEquilibrium, Composition, IonizingSources, SuppliedFraction

SHAPE = (20, 19, 21)
CELL_PC = 0.4
ORIGIN_PC = np.array([-1.0, 2.0, 0.5])
#: Star position relative to the grid's lower corner (pc); Q = 1e47 s^-1 in n_H ~ 20 cm^-3 gas
#: gives a Stromgren radius of about 2 pc, so the H II region fits inside the 8 pc box.
STAR_PC = np.array([2.5, 2.7, 2.3])
RATE = 1e47
NU = [1.0, 10.0] * u.GHz


def _gas(seed=5):
    return warm_sphere_in_cool_gas(SHAPE, CELL_PC, (5.8, 5.6, 5.4), seed, gamma=5.0 / 3.0, he2_max=0.6, he3_max=0.4)


def _write(path, gas):
    with h5py.File(path, "w") as h5:
        h5.attrs["cell_size"] = CELL_PC
        h5.attrs["length_unit"] = "pc"
        h5.attrs["origin"] = ORIGIN_PC
        h5.create_dataset("gas/rho", data=gas["rho"]).attrs["units"] = "g/cm**3"
        h5.create_dataset("gas/T", data=gas["T"]).attrs["units"] = "K"
        h5.create_dataset("gas/P", data=gas["P"]).attrs["units"] = "dyn/cm**2"
        h5.create_dataset("gas/ne", data=gas["rho"] / M_H).attrs["units"] = "cm**-3"
        # stored in km^2/s^2: the readers convert to erg/g (1 km^2 s^-2 = 1e10 erg g^-1)
        h5.create_dataset("gas/e", data=gas["e"] / 1e10).attrs["units"] = "km**2/s**2"
        h5.create_dataset("ion/xHII", data=gas["x"])  # no unit: a fraction
        h5.create_dataset("ion/xHeII", data=gas["he2"]).attrs["units"] = ""
        h5.create_dataset("ion/xHeIII", data=gas["he3"].astype(np.float32))
    return path


@pytest.fixture(scope="module")
def gas():
    return _gas()


@pytest.fixture(scope="module")
def h5file(tmp_path_factory, gas):
    return _write(tmp_path_factory.mktemp("ionization") / "cloud.h5", gas)


def _star(offset_pc=STAR_PC, **kwargs):
    kwargs.setdefault("ionized_temperature", 1e4 * u.K)
    return IonizingSources(positions=[ORIGIN_PC + np.asarray(offset_pc)] * u.pc, rates=[RATE] / u.s, **kwargs)


# Each case: (file arguments, what from_arrays gets in their place, model factory). Models are made
# fresh per snapshot (a model remembers which warnings it gave).
CASES = {
    "collisional": (dict(temperature="gas/T"), ("T",), lambda: "collisional"),
    "collisional B, pressure": (dict(pressure="gas/P"), ("P",), lambda: CollisionalEquilibrium(case="B")),
    "pressure, collisional": (dict(pressure="gas/P"), ("P",), lambda: "collisional"),
    "internal energy, full": (dict(internal_energy="gas/e"), ("e",), lambda: "full"),
    "internal energy, gamma 1.4, collisional": (
        dict(internal_energy="gas/e", gamma=1.4),
        ("e",),
        lambda: CollisionalEquilibrium(Composition(0.74, 0.25)),
    ),
    "supplied He II + He III": (
        dict(temperature="gas/T"),
        ("T",),
        lambda: SuppliedFraction("ion/xHII", helium_ii="ion/xHeII", helium_iii="ion/xHeIII"),
    ),
    "pressure, supplied He II": (
        dict(pressure="gas/P"),
        ("P",),
        lambda: SuppliedFraction("ion/xHII", helium_ii="ion/xHeII"),
    ),
    "sources": (dict(temperature="gas/T"), ("T",), lambda: _star()),
    "pressure, sources, helium none": (
        dict(pressure="gas/P"),
        ("P",),
        lambda: _star(helium="none", composition=Composition(0.74, 0.25)),
    ),
    "sources outside, allowed": (
        dict(temperature="gas/T"),
        ("T",),
        lambda: _star(offset_pc=(-1.0, 4.0, 4.0), allow_outside=True),
    ),
}
IDS = list(CASES)


def _from_arrays(gas, case, dtype=np.float32):
    """The in-memory snapshot of a case: the arrays as the file holds them, the fractions as ``fields``."""
    kwargs, _, make = CASES[case]
    thermal = {
        "gas/T": ("temperature", gas["T"] * u.K),
        "gas/P": ("pressure", gas["P"] * u.dyn / u.cm**2),
        "gas/e": ("internal_energy", (gas["e"] / 1e10) * u.km**2 / u.s**2),
    }
    name, value = next(thermal[v] for k, v in kwargs.items() if k != "gamma")
    fields = {
        "ion/xHII": gas["x"],
        "ion/xHeII": gas["he2"],
        "ion/xHeIII": gas["he3"].astype(np.float32).astype(np.float64),
    }
    return rtrace.Snapshot.from_arrays(
        **{name: value},
        density=gas["rho"] * u.g / u.cm**3,
        gamma=kwargs.get("gamma"),
        ionization=make(),
        cell_size=CELL_PC * u.pc,
        origin=ORIGIN_PC * u.pc,
        fields=fields,
        dtype=dtype,
    )


def _read(reader, path, case, **extra):
    kwargs, _, make = CASES[case]
    return reader(path, density="gas/rho", ionization=make(), **kwargs, **extra)


def _assert_same(snap, ref, same_source=True):
    assert snap.shape == ref.shape == SHAPE
    assert np.array_equal(snap.cell_size, ref.cell_size) and np.array_equal(snap.origin, ref.origin)
    for name in ("_t", "_ne", "_ni"):
        a, b = getattr(snap, name), getattr(ref, name)
        assert a.dtype == b.dtype
        assert np.array_equal(a, b), name
    assert snap.checksum() == ref.checksum()
    mine = dict(snap.provenance)
    theirs = dict(ref.provenance)
    if not same_source:
        mine.pop("source"), theirs.pop("source")
    assert mine == theirs


@pytest.mark.parametrize("case", IDS)
def test_read_hdf5_equals_from_arrays(h5file, gas, case):
    snap = _read(read_hdf5, h5file, case)
    ref = _from_arrays(gas, case)
    _assert_same(snap, ref, same_source=False)
    assert snap.provenance["source"] == f"hdf5:{h5file}"
    # the case is not trivial: part of the gas is ionized, part is not
    assert 0 < np.count_nonzero(snap._ne > 0.5 * snap._ne.max()) < snap._ne.size
    if CASES[case][1] != ("T",):
        assert snap.provenance["temperature"].startswith("from the")


@pytest.mark.parametrize("case", IDS)
def test_open_hdf5_equals_read_hdf5(h5file, case, monkeypatch):
    eager = _read(read_hdf5, h5file, case)
    # pieces far smaller than the grid: the streamed pass must add up to the whole
    monkeypatch.setattr(lazy, "_SCAN_CELLS", 1999)
    monkeypatch.setattr(lazy, "_PIECE_CELLS", 997)
    snap = _read(open_hdf5, h5file, case)
    assert not snap.in_memory
    # the checksum and ranges come from the pass at open, before any field is read again
    assert snap.checksum() == eager.checksum()
    assert snap.describe().splitlines()[1:] == eager.describe().splitlines()[1:]
    _assert_same(snap, eager)
    if "sources" in case:
        assert "photon_budget" in snap.provenance and "ionizing_sources" in snap.provenance


def test_float64_storage_is_the_same_too(h5file, gas):
    case = "pressure, sources, helium none"
    eager = _read(read_hdf5, h5file, case, dtype=np.float64)
    _assert_same(eager, _from_arrays(gas, case, dtype=np.float64), same_source=False)
    _assert_same(_read(open_hdf5, h5file, case, dtype=np.float64), eager)


def test_trace_through_a_file_backed_sources_snapshot(h5file):
    eager = _read(read_hdf5, h5file, "sources")
    snap = _read(open_hdf5, h5file, "sources")
    view = rtrace.View(los=(0.3, -0.5, 0.8), north=(0, 0, 1), npix=24, distance=1 * u.kpc)
    ref = rtrace.trace(eager, view, NU, supersample=1)
    assert ref.tau.max() > 0 and ref.intensity.value.max() > 0  # the H II region shines
    for size in (None, 7):
        res = rtrace.trace(snap, view, NU, supersample=1, brick_size=size)
        for x, y in (
            (res.intensity.value, ref.intensity.value),
            (res.tau, ref.tau),
            (res.emission_measure.value, ref.emission_measure.value),
        ):
            assert np.allclose(x, y, rtol=1e-10, atol=0)
        assert res.provenance["checksum"] == ref.provenance["checksum"]


# -- errors, found before any work -------------------------------------------------------------


def test_sources_outside_the_grid_are_refused_before_the_scan(h5file, gas, monkeypatch):
    # The upper faces are outside: cell i spans [origin + i dx, origin + (i + 1) dx).
    corner = np.asarray(SHAPE) * CELL_PC
    stars = IonizingSources(
        positions=[ORIGIN_PC + STAR_PC, ORIGIN_PC + corner * [0.5, 1.0, 0.5]] * u.pc,
        rates=[RATE, RATE] / u.s,
        ionized_temperature=1e4 * u.K,
    )
    message = r"positions: 1 of 2 sources lie outside the grid .*\(source 1 at .*allow_outside=True"

    def no_scan(*args, **kwargs):
        raise AssertionError("the file was scanned before the sources were checked")

    monkeypatch.setattr(lazy, "_scan", no_scan)
    with pytest.raises(InputError, match=message) as lazy_error:
        open_hdf5(h5file, temperature="gas/T", density="gas/rho", ionization=stars)
    with pytest.raises(InputError, match=message) as eager_error:
        read_hdf5(h5file, temperature="gas/T", density="gas/rho", ionization=stars)
    with pytest.raises(InputError, match=message) as ref_error:
        rtrace.Snapshot.from_arrays(
            temperature=gas["T"] * u.K,
            density=gas["rho"] * u.g / u.cm**3,
            ionization=stars,
            cell_size=CELL_PC * u.pc,
            origin=ORIGIN_PC * u.pc,
        )
    assert str(lazy_error.value) == str(eager_error.value) == str(ref_error.value)
    # a source at the lower corner is inside
    inside = IonizingSources(positions=[ORIGIN_PC] * u.pc, rates=[0.0] / u.s)
    assert not inside.check_geometry(
        SHAPE, np.full(3, (CELL_PC * u.pc).to_value(u.cm)), (ORIGIN_PC * u.pc).to_value(u.cm)
    ).any()


def test_sources_need_mass_density(h5file, gas):
    for reader in (read_hdf5, open_hdf5):
        with pytest.raises(InputError, match="ionization: only used with density"):
            reader(h5file, temperature="gas/T", electron_density="gas/ne", ionization=_star())
    with pytest.raises(InputError, match="ionization: only used with density"):
        rtrace.Snapshot.from_arrays(
            temperature=gas["T"] * u.K,
            electron_density=np.ones(SHAPE) * u.cm**-3,
            ionization=_star(),
            cell_size=CELL_PC * u.pc,
        )


def test_in_memory_fractions_need_read_hdf5(h5file, gas):
    whole = SuppliedFraction(gas["x"], helium="none")
    mixed = SuppliedFraction("ion/xHII", helium_ii=gas["he2"])
    for model in (whole, mixed):
        with pytest.raises(
            InputError, match="ionization: a model holding in-memory arrays cannot be read brick by brick"
        ):
            open_hdf5(h5file, temperature="gas/T", density="gas/rho", ionization=model)
    # the eager reader takes them, as from_arrays does
    snap = read_hdf5(h5file, temperature="gas/T", density="gas/rho", ionization=mixed)
    ref = rtrace.Snapshot.from_arrays(
        temperature=gas["T"] * u.K,
        density=gas["rho"] * u.g / u.cm**3,
        ionization=SuppliedFraction("ion/xHII", helium_ii=gas["he2"]),
        fields={"ion/xHII": gas["x"]},
        cell_size=CELL_PC * u.pc,
        origin=ORIGIN_PC * u.pc,
    )
    _assert_same(snap, ref, same_source=False)


def test_helium_fractions_adding_above_one(tmp_path, gas, monkeypatch):
    bad = dict(gas)
    he2, he3 = gas["he2"].copy(), gas["he3"].copy()
    cells = [7, 2500, 7000]  # in different pieces of the file-backed pass below
    he2.ravel()[cells] = 0.6  # each fraction within [0, 1], their sums not
    he3.ravel()[cells] = [0.41, 0.5, 0.75]
    bad["he2"], bad["he3"] = he2, he3
    path = _write(tmp_path / "bad.h5", bad)
    model = dict(helium_ii="ion/xHeII", helium_iii="ion/xHeIII")
    message = (
        r"helium_ii 'ion/xHeII' \+ helium_iii 'ion/xHeIII': 3 of 7980 cells have He II \+ He III "
        r"fractions above 1"
    )
    with pytest.raises(InputError, match=message) as ref_error:
        rtrace.Snapshot.from_arrays(
            temperature=gas["T"] * u.K,
            density=gas["rho"] * u.g / u.cm**3,
            ionization=SuppliedFraction("ion/xHII", **model),
            cell_size=CELL_PC * u.pc,
            fields={"ion/xHII": gas["x"], "ion/xHeII": he2, "ion/xHeIII": he3.astype(np.float32).astype(np.float64)},
        )
    with pytest.raises(InputError, match=message) as eager_error:
        read_hdf5(path, temperature="gas/T", density="gas/rho", ionization=SuppliedFraction("ion/xHII", **model))
    # the file-backed pass works in pieces; the count must still be over the whole grid, as it is for
    # every other field (tests/test_out_of_core.py)
    monkeypatch.setattr(lazy, "_SCAN_CELLS", 1999)
    monkeypatch.setattr(lazy, "_PIECE_CELLS", 997)
    with pytest.raises(InputError, match=message) as lazy_error:
        open_hdf5(path, temperature="gas/T", density="gas/rho", ionization=SuppliedFraction("ion/xHII", **model))
    assert str(eager_error.value) == str(ref_error.value)
    assert str(lazy_error.value).startswith(str(eager_error.value).split(" (largest")[0])


def test_a_helium_fraction_above_one_names_its_dataset(tmp_path, gas):
    bad = dict(gas)
    bad["he2"] = gas["he2"].copy()
    bad["he2"].ravel()[[3, 33, 333]] = 1.5
    path = _write(tmp_path / "bad.h5", bad)
    for reader in (read_hdf5, open_hdf5):
        with pytest.raises(InputError, match=r"'ion/xHeII'.* 3 of 7980 cells"):
            reader(
                path,
                pressure="gas/P",
                density="gas/rho",
                ionization=SuppliedFraction("ion/xHII", helium_ii="ion/xHeII"),
            )


@pytest.mark.parametrize(
    "kwargs,message",
    [
        (
            dict(temperature="gas/T", pressure="gas/P", density="gas/rho"),
            r"give exactly one thermal input \(got temperature, pressure\)",
        ),
        (
            dict(pressure="gas/P", internal_energy="gas/e", density="gas/rho"),
            r"give exactly one thermal input \(got pressure, internal_energy\)",
        ),
        (dict(density="gas/rho"), r"give exactly one thermal input \(got none\)"),
        (dict(pressure="gas/P", electron_density="gas/ne"), "pressure: needs density"),
        (dict(internal_energy="gas/e", electron_density="gas/ne"), "internal_energy: needs density"),
        (dict(temperature="gas/T", density="gas/rho", gamma=1.4), "gamma: only used with pressure or internal_energy"),
        (dict(internal_energy="gas/e", density="gas/rho", gamma=1.0), "gamma: the adiabatic index must be"),
        (dict(pressure="gas/rho", density="gas/rho"), "pressure: dataset 'gas/rho' has unit 'g / cm3'"),
        (dict(internal_energy="gas/P", density="gas/rho"), "internal_energy: dataset 'gas/P' has unit"),
        (
            dict(pressure="gas/P", density="gas/rho", ionization="collisional", helium="single"),
            "helium: not used by 'collisional'",
        ),
    ],
)
def test_thermal_input_errors(h5file, kwargs, message):
    for reader in (read_hdf5, open_hdf5):
        with pytest.raises(InputError, match=message):
            reader(h5file, **kwargs)


def test_empty_cells_cannot_take_a_temperature_from_the_pressure(tmp_path, gas):
    bad = dict(gas)
    bad["rho"] = gas["rho"].copy()
    bad["rho"].ravel()[[10, 20]] = 0.0
    path = _write(tmp_path / "empty.h5", bad)
    message = (
        r"density: 2 of 7980 cells are empty \(density 0\), where a temperature cannot be derived "
        r"from the pressure"
    )
    for reader in (read_hdf5, open_hdf5):
        with pytest.raises(InputError, match=message):
            reader(path, pressure="gas/P", density="gas/rho", ionization="collisional")
    # with the temperature given, empty cells are fine (no gas, no emission)
    snap = read_hdf5(path, temperature="gas/T", density="gas/rho", ionization="collisional")
    assert snap._ne.ravel()[10] == 0.0


# -- yt ----------------------------------------------------------------------------------------


@pytest.fixture(scope="module")
def yt_uniform(gas):
    """The scenario as an in-memory yt dataset, fractions under yt's species names (gas aliases)."""
    yt = pytest.importorskip("yt")
    data = {
        "density": (gas["rho"], "g/cm**3"),
        "temperature": (gas["T"], "K"),
        "pressure": (gas["P"], "dyn/cm**2"),
        "specific_thermal_energy": (gas["e"], "erg/g"),
        "H_p1_fraction": (gas["x"], "dimensionless"),
        "He_p1_fraction": (gas["he2"], "dimensionless"),
        "He_p2_fraction": (gas["he3"], "dimensionless"),
    }
    upper = ORIGIN_PC + np.asarray(SHAPE) * CELL_PC
    return yt.load_uniform_grid(data, SHAPE, length_unit=(1.0, "pc"), bbox=np.c_[ORIGIN_PC, upper])


def _yt_reference(snap, gas, thermal, model, gamma=None, fields=None):
    """from_arrays on the scenario's arrays, with the geometry yt reported (its pc is not astropy's bit for bit)."""
    values = {
        "temperature": gas["T"] * u.K,
        "pressure": gas["P"] * u.dyn / u.cm**2,
        "internal_energy": gas["e"] * u.erg / u.g,
    }
    return rtrace.Snapshot.from_arrays(
        **{thermal: values[thermal]},
        density=gas["rho"] * u.g / u.cm**3,
        gamma=gamma,
        ionization=model,
        cell_size=snap.cell_size * u.cm,
        origin=snap.origin * u.cm,
        fields=fields,
    )


YT_CASES = {
    "collisional": ("temperature", dict(temperature="temperature"), lambda: "collisional", None),
    "pressure, collisional": ("pressure", dict(pressure=("gas", "pressure")), lambda: "collisional", None),
    "internal energy, gamma 1.4, full": (
        "internal_energy",
        dict(internal_energy="specific_thermal_energy", gamma=1.4),
        lambda: "full",
        None,
    ),
    "supplied He II + He III": (
        "temperature",
        dict(temperature="temperature"),
        lambda: SuppliedFraction("H_p1_fraction", helium_ii="gas/He_p1_fraction", helium_iii="stream/He_p2_fraction"),
        ("H_p1_fraction", "gas/He_p1_fraction", "stream/He_p2_fraction"),
    ),
    "sources": ("temperature", dict(temperature="temperature"), lambda: _star(), None),
    "pressure, sources": ("pressure", dict(pressure="pressure"), lambda: _star(), None),
}


@pytest.mark.parametrize("case", list(YT_CASES))
def test_from_yt_equals_from_arrays(yt_uniform, gas, case):
    thermal, kwargs, make, names = YT_CASES[case]
    snap = rtrace.Snapshot.from_yt(yt_uniform, density="density", ionization=make(), **kwargs)
    assert isinstance(snap, rtrace.Snapshot)
    np.testing.assert_allclose(snap.cell_size, (CELL_PC * u.pc).to_value(u.cm), rtol=1e-9)  # yt's pc: 2e-10 off
    np.testing.assert_allclose(snap.origin, (ORIGIN_PC * u.pc).to_value(u.cm), rtol=1e-9)
    fields = None
    if names is not None:
        fields = dict(zip(names, (gas["x"], gas["he2"], gas["he3"]), strict=True))
    ref = _yt_reference(snap, gas, thermal, make(), kwargs.get("gamma"), fields)
    _assert_same(snap, ref, same_source=False)
    assert snap.provenance["source"].startswith("yt: ")


def test_from_yt_missing_fraction_field_lists_the_fields(yt_uniform):
    with pytest.raises(
        InputError,
        match=r"ionization field 'gas/He_p3_fraction': yt field 'gas/He_p3_fraction' "
        r"is not in .*stream/He_p1_fraction",
    ):
        rtrace.Snapshot.from_yt(
            yt_uniform,
            temperature="temperature",
            density="density",
            ionization=SuppliedFraction("H_p1_fraction", helium_iii="gas/He_p3_fraction"),
        )


def test_from_yt_sources_outside_the_grid(yt_uniform):
    stars = IonizingSources(positions=[ORIGIN_PC - 0.1] * u.pc, rates=[RATE] / u.s)
    with pytest.raises(InputError, match="positions: 1 of 1 sources lie outside the grid"):
        rtrace.Snapshot.from_yt(yt_uniform, temperature="temperature", density="density", ionization=stars)


def test_from_yt_sources_need_one_resolution():
    yt = pytest.importorskip("yt")
    rng = np.random.default_rng(8)
    grids = [
        dict(left_edge=[0, 0, 0], right_edge=[1, 1, 1], level=0, dimensions=[8, 8, 8]),
        dict(left_edge=[0.25, 0.25, 0.25], right_edge=[0.75, 0.75, 0.75], level=1, dimensions=[8, 8, 8]),
    ]
    for g in grids:
        g["density"] = (rng.uniform(1e-23, 1e-22, g["dimensions"]), "g/cm**3")
        g["temperature"] = (rng.uniform(50, 200, g["dimensions"]), "K")
    ds = yt.load_amr_grids(grids, [8, 8, 8], length_unit=(4, "pc"))
    with pytest.raises(
        InputError,
        match=r"IonizingSources needs the whole grid at one resolution; .* "
        r"2-level AMR hierarchy: give a level \(level= in Python, "
        r"\[snapshot\]\.level in a job file\)",
    ):
        rtrace.Snapshot.from_yt(
            ds,
            temperature="temperature",
            density="density",
            ionization=IonizingSources(positions=[[2.0, 2.0, 2.0]] * u.pc, rates=[1e45] / u.s),
        )
    # a local model keeps the hierarchy; sampled at level 1 the sources are solved on a uniform grid
    assert isinstance(
        rtrace.Snapshot.from_yt(ds, temperature="temperature", density="density", ionization="collisional"),
        rtrace.amr.AMRSnapshot,
    )
    stars = IonizingSources(positions=[[2.0, 2.0, 2.0]] * u.pc, rates=[1e45] / u.s, ionized_temperature=1e4 * u.K)
    snap = rtrace.Snapshot.from_yt(ds, temperature="temperature", density="density", ionization=stars, level=1)
    assert snap.shape == (16, 16, 16) and snap._ne.max() > 0
