"""HDF5 snapshot reader: files written here with h5py, read back through rtrace.io.read_hdf5.

Reference values: the arrays written, converted with astropy.units; the
snapshot built from the same arrays by rtrace.Snapshot.from_arrays.
"""

import astropy.units as u
import h5py
import numpy as np
import pytest

import rtrace
from rtrace.errors import InputError
from rtrace.io import read_hdf5

SHAPE = (6, 5, 4)
PC_CM = (1 * u.pc).to_value(u.cm)


@pytest.fixture(scope="module")
def fields():
    rng = np.random.default_rng(11)
    return {
        "T": rng.uniform(6000, 12000, SHAPE),
        "ne": rng.uniform(10, 1000, SHAPE),
        "rho": rng.uniform(1e-23, 1e-21, SHAPE),
        "x": rng.uniform(0, 1, SHAPE),
    }


@pytest.fixture
def h5file(tmp_path, fields):
    """Nested layout: /gas/thermal/T (K), /gas/ne (cm**-3), /gas/ni (no units), /rho (g/cm**3)."""
    path = tmp_path / "snap.h5"
    with h5py.File(path, "w") as f:
        f.attrs["cell_size"] = [0.01, 0.02, 0.03]
        f.attrs["length_unit"] = "pc"
        f.attrs["origin"] = [1.0, 2.0, 3.0]
        f.create_dataset("gas/thermal/T", data=fields["T"]).attrs["units"] = "K"
        # Byte-string attribute, as many codes write them.
        f.create_dataset("gas/ne", data=fields["ne"].astype(np.float32)).attrs["units"] = np.bytes_("cm**-3")
        f.create_dataset("gas/ni", data=1.1 * fields["ne"])
        f.create_dataset("rho", data=fields["rho"]).attrs["units"] = "g/cm**3"
        f.create_dataset("xHII", data=fields["x"])
        f.create_dataset("flat", data=np.ones((6, 20)))
        f.create_dataset("small", data=np.ones((3, 5, 4)))
        f.create_dataset("names", data=np.full(SHAPE, b"abc"))
        f.create_dataset("badunit", data=fields["T"]).attrs["units"] = "furlongs per fortnight!"
        f.create_dataset("lengthy", data=fields["T"]).attrs["units"] = "cm"
    return path


def test_round_trip(h5file, fields):
    snap = read_hdf5(
        h5file, temperature="gas/thermal/T", electron_density="gas/ne", ion_density="gas/ni", units={"gas/ni": "cm**-3"}
    )
    assert isinstance(snap, rtrace.Snapshot) and snap.shape == SHAPE
    assert snap.temperature.dtype == np.float32
    assert np.allclose(snap.temperature.to_value(u.K), fields["T"], rtol=1e-7)
    assert np.allclose(snap.electron_density.to_value(u.cm**-3), fields["ne"], rtol=1e-7)
    assert np.allclose(snap.ion_density.to_value(u.cm**-3), 1.1 * fields["ne"], rtol=1e-7)
    # Geometry from root attributes, in pc (astropy's parsec).
    assert np.allclose(snap.cell_size, np.array([0.01, 0.02, 0.03]) * PC_CM, rtol=1e-12)
    assert np.allclose(snap.origin, np.array([1.0, 2.0, 3.0]) * PC_CM, rtol=1e-12)
    assert snap.provenance["source"] == f"hdf5:{h5file}"
    assert snap.provenance["ionization"] == "supplied n_e and ion term"


def test_units_argument_overrides_attribute(h5file, fields):
    # The file says cm**-3; the caller says m**-3: the argument wins.
    snap = read_hdf5(
        h5file, temperature="gas/thermal/T", electron_density="gas/ne", units={"gas/ne": "m**-3"}, dtype=np.float64
    )
    assert np.allclose(snap.electron_density.to_value(u.cm**-3), fields["ne"].astype(np.float32) * 1e-6, rtol=1e-12)
    # A temperature unit other than kelvin is converted (astropy temperature equivalency).
    snap = read_hdf5(
        h5file,
        temperature="gas/thermal/T",
        electron_density="gas/ne",
        units={"gas/thermal/T": "deg_C"},
        dtype=np.float64,
    )
    assert np.allclose(snap.temperature.to_value(u.K), fields["T"] + 273.15, rtol=1e-12)


def test_geometry_arguments_and_defaults(tmp_path, fields):
    path = tmp_path / "bare.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset("T", data=fields["T"]).attrs["units"] = "K"
        f.create_dataset("ne", data=fields["ne"]).attrs["units"] = "cm**-3"
    snap = read_hdf5(path, temperature="T", electron_density="ne", cell_size=2 * u.au)
    assert np.allclose(snap.cell_size, (2 * u.au).to_value(u.cm), rtol=1e-12)
    assert np.array_equal(snap.origin, np.zeros(3))  # no origin attribute: zeros
    with h5py.File(path, "a") as f:
        f.attrs["cell_size"] = 0.5
        f.attrs["cell_size_units"] = "pc"
        f.attrs["origin"] = [-1.0, 0.0, 1.0]
    snap = read_hdf5(path, temperature="T", electron_density="ne")
    assert np.allclose(snap.cell_size, 0.5 * PC_CM, rtol=1e-12)
    # The origin takes the grid's length unit when it has none of its own.
    assert np.allclose(snap.origin, np.array([-1.0, 0.0, 1.0]) * PC_CM, rtol=1e-12)
    snap = read_hdf5(path, temperature="T", electron_density="ne", origin=[0, 0, 5] * u.cm)
    assert np.array_equal(snap.origin, [0.0, 0.0, 5.0])


def test_density_and_ionization(h5file, fields):
    for ionization in ("full", "threshold"):
        snap = read_hdf5(h5file, temperature="gas/thermal/T", density="rho", ionization=ionization)
        ref = rtrace.Snapshot.from_arrays(
            temperature=fields["T"] * u.K,
            cell_size=1 * u.pc,
            density=fields["rho"] * u.g / u.cm**3,
            ionization=ionization,
        )
        assert np.allclose(snap.electron_density.value, ref.electron_density.value, rtol=1e-6)
        assert np.allclose(snap.ion_density.value, ref.ion_density.value, rtol=1e-6)
        assert snap.provenance["ionization"] == ref.provenance["ionization"]
    # Any other string names an ionized-fraction dataset (dimensionless, needs no unit).
    snap = read_hdf5(h5file, temperature="gas/thermal/T", density="rho", ionization="xHII")
    ref = rtrace.Snapshot.from_arrays(
        temperature=fields["T"] * u.K, cell_size=1 * u.pc, density=fields["rho"] * u.g / u.cm**3, ionization=fields["x"]
    )
    assert np.allclose(snap.electron_density.value, ref.electron_density.value, rtol=1e-6)
    # A SuppliedFraction naming a field reads that dataset too.
    from rtrace.physics.ionization import SuppliedFraction

    snap = read_hdf5(
        h5file, temperature="gas/thermal/T", density="rho", ionization=SuppliedFraction("xHII", helium="none")
    )
    ref = rtrace.Snapshot.from_arrays(
        temperature=fields["T"] * u.K,
        cell_size=1 * u.pc,
        density=fields["rho"] * u.g / u.cm**3,
        ionization=SuppliedFraction(fields["x"], helium="none"),
    )
    assert np.allclose(snap.ion_density.value, ref.ion_density.value, rtol=1e-6)


@pytest.mark.parametrize("subvolume", [((1, 4), (0, 5), (2, 4)), (slice(1, 4), slice(None), slice(2, None))])
def test_subvolume(h5file, fields, subvolume, monkeypatch):
    requested = []
    real_getitem = h5py.Dataset.__getitem__

    def spy(self, args, *rest, **kwargs):
        requested.append((self.name, args))
        return real_getitem(self, args, *rest, **kwargs)

    monkeypatch.setattr(h5py.Dataset, "__getitem__", spy)
    snap = read_hdf5(h5file, temperature="gas/thermal/T", electron_density="gas/ne", subvolume=subvolume)
    assert snap.shape == (3, 5, 2)
    assert np.allclose(snap.temperature.value, fields["T"][1:4, :, 2:4], rtol=1e-7)
    assert np.allclose(snap.electron_density.value, fields["ne"][1:4, :, 2:4], rtol=1e-7)
    # Only the hyperslab is read from each dataset.
    assert {name for name, _ in requested} == {"/gas/thermal/T", "/gas/ne"}
    assert all(args == (slice(1, 4), slice(0, 5), slice(2, 4)) for _, args in requested)
    # The origin moves to the lower corner of the first cell read: origin + start * cell size.
    expected = (np.array([1.0, 2.0, 3.0]) + np.array([1, 0, 2]) * np.array([0.01, 0.02, 0.03])) * PC_CM
    assert np.allclose(snap.origin, expected, rtol=1e-12)
    assert snap.provenance["source"] == f"hdf5:{h5file} subvolume=[1:4, 0:5, 2:4]"


# --------------------------------------------------------------------------------------------
# errors
# --------------------------------------------------------------------------------------------


def test_missing_dataset_lists_the_file(h5file):
    with pytest.raises(InputError) as err:
        read_hdf5(h5file, temperature="gas/thermal/T", electron_density="gas/n_e")
    msg = str(err.value)
    assert msg.startswith("electron_density: dataset 'gas/n_e' not found")
    for name in ("gas/thermal/T", "gas/ne", "gas/ni", "rho", "xHII"):
        assert name in msg
    with pytest.raises(InputError, match="temperature: dataset 'gas/thermal' is a group, not a dataset"):
        read_hdf5(h5file, temperature="gas/thermal", electron_density="gas/ne")


def test_dataset_errors_name_the_dataset(h5file):
    base = dict(temperature="gas/thermal/T", electron_density="gas/ne")
    cases = [
        (dict(base, ion_density="flat"), r"ion_density: dataset 'flat' has 2 dimension\(s\)"),
        (
            dict(base, ion_density="small"),
            r"ion_density: dataset 'small' has shape \(3, 5, 4\), but "
            r"temperature 'gas/thermal/T' has shape \(6, 5, 4\)",
        ),
        (dict(base, ion_density="names"), r"ion_density: dataset 'names' has non-numeric type"),
        (dict(base, ion_density="gas/ni"), r"ion_density: dataset 'gas/ni' has no 'units' attribute"),
        (
            dict(base, ion_density="badunit"),
            r"ion_density: dataset 'badunit' unit 'furlongs per "
            r"fortnight!' \(attribute 'units'\) cannot be parsed",
        ),
        (dict(base, ion_density="lengthy"), r"ion_density: dataset 'lengthy' has unit 'cm'"),
        (
            dict(base, ion_density="gas/ni", units={"gas/ni": "K"}),
            r"ion_density: dataset 'gas/ni' has unit 'K' \(units argument\)",
        ),
        (dict(base, units={"typo": "K"}), r"units: 'typo' name\(s\) no dataset being read"),
        (dict(base, temperature=3), r"temperature: expected a dataset name"),
        (dict(base, dtype=np.int32), r"dtype: must be float32 or float64"),
    ]
    for kwargs, pattern in cases:
        with pytest.raises(InputError, match=pattern):
            read_hdf5(h5file, **kwargs)


def test_geometry_errors(tmp_path, fields):
    path = tmp_path / "g.h5"
    with h5py.File(path, "w") as f:
        f.create_dataset("T", data=fields["T"]).attrs["units"] = "K"
        f.create_dataset("ne", data=fields["ne"]).attrs["units"] = "cm**-3"
    args = dict(temperature="T", electron_density="ne")
    with pytest.raises(InputError, match="cell_size: not given and .* has no root attribute 'cell_size'"):
        read_hdf5(path, **args)
    with h5py.File(path, "a") as f:
        f.attrs["cell_size"] = 0.1
    with pytest.raises(InputError, match="cell_size: root attribute 'cell_size' of .* has no unit"):
        read_hdf5(path, **args)
    with h5py.File(path, "a") as f:
        f.attrs["length_unit"] = 3.086e18  # a number is not a unit
    with pytest.raises(InputError, match="cell_size: root attribute 'length_unit' .* must be a unit string"):
        read_hdf5(path, **args)
    with h5py.File(path, "a") as f:
        f.attrs["length_unit"] = "s"
    with pytest.raises(InputError, match="cell_size: root attribute 'length_unit' = 's' .* is not a length"):
        read_hdf5(path, **args)
    with h5py.File(path, "a") as f:
        f.attrs["length_unit"] = "kpc"
        f.attrs["origin"] = [1.0, 2.0]
    with pytest.raises(InputError, match="origin: root attribute of .* must be 1 or 3 numbers"):
        read_hdf5(path, **args)
    with pytest.raises(InputError, match="cell_size: expected a length"):
        read_hdf5(path, cell_size=1 * u.s, origin=[0, 0, 0] * u.cm, **args)
    with pytest.raises(InputError, match=r"cell_size: expected a scalar or a 3-vector, got shape \(2,\)"):
        read_hdf5(path, cell_size=[1, 2] * u.pc, origin=[0, 0, 0] * u.cm, subvolume=[(0, 1)] * 3, **args)
    with pytest.raises(InputError, match="origin: expected a length"):
        read_hdf5(path, origin=[0, 0, 0], **args)


def test_subvolume_errors(h5file):
    args = dict(temperature="gas/thermal/T", electron_density="gas/ne")
    cases = [
        (((0, 2), (0, 2)), "subvolume: expected three"),
        (((0, 2), (0, 9), (0, 2)), r"subvolume: axis 1 range \(0, 9\) lies outside the grid's 0..5"),
        (((3, 3), (0, 2), (0, 2)), r"subvolume: axis 0 range \(3, 3\) is empty"),
        (((0, 2), (0, 2), slice(0, 4, 2)), "subvolume: axis 2 slice has step 2"),
        (((0, 2), 7, (0, 2)), "subvolume: axis 1 expected a"),
    ]
    for subvolume, pattern in cases:
        with pytest.raises(InputError, match=pattern):
            read_hdf5(h5file, subvolume=subvolume, **args)


def test_file_errors_and_value_checks(tmp_path, h5file, fields):
    with pytest.raises(InputError, match="path: HDF5 file .* not found"):
        read_hdf5(tmp_path / "missing.h5", temperature="T")
    text = tmp_path / "plain.h5"
    text.write_text("not hdf5")
    with pytest.raises(InputError, match="path: .* cannot be opened as an HDF5 file"):
        read_hdf5(text, temperature="T")
    # Values are validated by Snapshot.from_arrays, which counts the bad cells.
    path = tmp_path / "neg.h5"
    temperature = fields["T"].copy()
    temperature[0, 0, :2] = -5.0
    with h5py.File(path, "w") as f:
        f.attrs["cell_size"], f.attrs["length_unit"] = 1.0, "pc"
        f.create_dataset("T", data=temperature).attrs["units"] = "K"
        f.create_dataset("ne", data=fields["ne"]).attrs["units"] = "cm**-3"
    with pytest.raises(InputError, match="temperature: 2 of 120 cells"):
        read_hdf5(path, temperature="T", electron_density="ne")
