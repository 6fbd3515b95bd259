"""Read a gridded snapshot from an HDF5 file.

Any layout works: the caller names the datasets (paths inside groups are
allowed, e.g. ``"fluid/temperature"``). Every dataset needs a unit, from the
``units`` argument or from the dataset's ``"units"`` attribute (a string
astropy parses: ``"K"``, ``"cm**-3"``, ``"g/cm**3"``, ``"1.67e-24 g/cm**3"``).
The argument overrides the attribute, so a file with a missing or wrong
attribute can be read without editing it. Geometry comes from the
arguments or from root attributes (``cell_size`` with ``cell_size_units``
or ``length_unit``; ``origin`` with ``origin_units``, ``length_unit`` or
``cell_size_units``).

Arrays are indexed ``[i, j, k]`` <-> ``(x, y, z)``, as in
:class:`~rtrace.Snapshot`.
"""

import os

import astropy.units as u
import h5py
import numpy as np

from ..errors import InputError
from ..gas import thermal_input
from ..physics.ionization import DEFAULT_MODEL, RESERVED_NAMES, SuppliedFraction, resolve_ionization
from ..quantities import storage_dtype
from ..snapshot import Snapshot

__all__ = ["read_hdf5"]

# What each field's unit must be convertible to, and with which equivalencies; fields the
# ionization model reads (fractions) are dimensionless and need no unit.
_FIELD_UNITS = {
    "temperature": (u.K, u.temperature()),
    "pressure": (u.dyn / u.cm**2, []),
    "internal_energy": (u.erg / u.g, []),
    "electron_density": (u.cm**-3, []),
    "ion_density": (u.cm**-3, []),
    "density": (u.g / u.cm**3, []),
}
_FRACTION_UNIT = (u.dimensionless_unscaled, [])
#: Prefix of the parameters that name a dataset the ionization model reads.
MODEL_FIELD = "model field "


def _text(value):
    """An HDF5 attribute holding a string (str, bytes or a 0-d/1-element array of them)."""
    if isinstance(value, np.ndarray) and value.size == 1:
        value = value.reshape(-1)[0]
    if isinstance(value, (bytes, np.bytes_)):
        return value.decode("utf-8", errors="replace")
    if isinstance(value, str):
        return value
    return None


def _all_datasets(handle):
    names = []
    handle.visititems(lambda name, obj: names.append(name) if isinstance(obj, h5py.Dataset) else None)
    return names


def _dataset(handle, name, parameter, path):
    key = str(name).lstrip("/")
    obj = handle.get(key) if key else None
    if not isinstance(obj, h5py.Dataset):
        what = "is a group, not a dataset" if isinstance(obj, h5py.Group) else "not found"
        available = ", ".join(_all_datasets(handle)) or "none"
        raise InputError(f"{parameter}: dataset '{name}' {what} in '{path}'; datasets in the file: {available}")
    if obj.dtype.kind not in "fiu":
        raise InputError(
            f"{parameter}: dataset '{name}' has non-numeric type {obj.dtype} (expected floats or integers)"
        )
    if obj.ndim != 3:
        raise InputError(
            f"{parameter}: dataset '{name}' has {obj.ndim} dimension(s) (shape {obj.shape}); expected a 3D grid"
        )
    return obj


def _unit(dataset, name, parameter, units, required=True):
    """Unit of a dataset: the ``units`` argument first, then its ``"units"`` attribute."""
    if name in units:
        text, origin = units[name], "units argument"
    elif "units" in dataset.attrs:
        raw = dataset.attrs["units"]
        text = _text(raw)
        origin = "attribute 'units'"
        if text is None:
            raise InputError(f"{parameter}: dataset '{name}' attribute 'units' is not a string ({raw!r})")
    elif not required:
        return u.dimensionless_unscaled
    else:
        raise InputError(
            f"{parameter}: dataset '{name}' has no 'units' attribute and no entry "
            f"in the units argument; give units={{'{name}': '...'}}"
        )
    try:
        unit = u.Unit(text)
    except (ValueError, TypeError) as exc:
        raise InputError(f"{parameter}: dataset '{name}' unit {text!r} ({origin}) cannot be parsed: {exc}") from None
    target, equivalencies = _FIELD_UNITS.get(parameter, _FRACTION_UNIT)
    if not unit.is_equivalent(target, equivalencies=equivalencies):
        raise InputError(
            f"{parameter}: dataset '{name}' has unit '{unit}' ({origin}), which is not convertible to {target}"
        )
    return unit


def subvolume_slices(subvolume, shape):
    """Validated ``(slices, starts)`` for a sub-volume in cell indices."""
    if subvolume is None:
        return tuple(slice(0, n) for n in shape), np.zeros(3, int)
    items = tuple(subvolume)
    if len(items) != 3:
        raise InputError(f"subvolume: expected three (start, stop) pairs or slices, got {len(items)}")
    slices, starts = [], []
    for axis, (item, n) in enumerate(zip(items, shape, strict=True)):
        if isinstance(item, slice):
            if item.step not in (None, 1):
                raise InputError(
                    f"subvolume: axis {axis} slice has step {item.step}; only contiguous ranges keep the cell size"
                )
            start, stop, _ = item.indices(n)
        else:
            try:
                start, stop = (int(v) for v in item)
            except (TypeError, ValueError):
                raise InputError(
                    f"subvolume: axis {axis} expected a (start, stop) pair or a slice, got {item!r}"
                ) from None
            if not (0 <= start and stop <= n):
                raise InputError(f"subvolume: axis {axis} range ({start}, {stop}) lies outside the grid's 0..{n}")
        if stop <= start:
            raise InputError(f"subvolume: axis {axis} range ({start}, {stop}) is empty")
        slices.append(slice(start, stop))
        starts.append(start)
    return tuple(slices), np.asarray(starts)


def _root_length(handle, key, unit_keys, path):
    """Root attribute ``key`` as a length Quantity, its unit from the first of ``unit_keys``."""
    value = np.asarray(handle.attrs[key])
    if value.dtype.kind not in "fiu" or value.size not in (1, 3):
        raise InputError(f"{key}: root attribute of '{path}' must be 1 or 3 numbers, got {value!r}")
    for unit_key in unit_keys:
        if unit_key in handle.attrs:
            raw = handle.attrs[unit_key]
            text = _text(raw)
            if text is None:
                raise InputError(
                    f"{key}: root attribute '{unit_key}' of '{path}' must be a unit "
                    f"string such as 'cm' or 'pc', got {raw!r}"
                )
            try:
                unit = u.Unit(text)
            except ValueError as exc:
                raise InputError(
                    f"{key}: root attribute '{unit_key}' = {text!r} of '{path}' cannot be parsed: {exc}"
                ) from None
            if not unit.is_equivalent(u.cm):
                raise InputError(f"{key}: root attribute '{unit_key}' = {text!r} of '{path}' is not a length")
            return u.Quantity(value.astype(float).reshape(-1) if value.size == 3 else float(value.reshape(-1)[0]), unit)
    raise InputError(
        f"{key}: root attribute '{key}' of '{path}' has no unit; add one of the "
        f"root attributes {', '.join(repr(k) for k in unit_keys)} or pass {key} "
        "as a Quantity"
    )


def checked_names(wanted, units):
    """Drop unused fields; every name must be a string and every ``units`` key a dataset being read."""
    wanted = {param: name for param, name in wanted.items() if name is not None}
    for param, name in wanted.items():
        if not isinstance(name, str):
            raise InputError(f"{param}: expected a dataset name (str), got {type(name).__name__}")
    unknown = sorted(set(units) - set(wanted.values()))
    if unknown:
        raise InputError(
            f"units: {', '.join(repr(k) for k in unknown)} name(s) no dataset being "
            f"read (datasets read: {', '.join(repr(v) for v in wanted.values())})"
        )
    return wanted


def open_fields(handle, wanted, units, path):
    """The datasets of ``wanted`` in an open file, their common shape and units (shape and units checked)."""
    first = next(iter(wanted))
    datasets = {param: _dataset(handle, name, param, path) for param, name in wanted.items()}
    shape = datasets[first].shape
    for param, ds in datasets.items():
        if ds.shape != shape:
            raise InputError(
                f"{param}: dataset '{wanted[param]}' has shape {ds.shape}, but "
                f"{first} '{wanted[first]}' has shape {shape}"
            )
    field_units = {
        param: _unit(ds, wanted[param], param, units, required=param in _FIELD_UNITS) for param, ds in datasets.items()
    }
    return datasets, shape, field_units


def wanted_fields(
    temperature, pressure, internal_energy, electron_density, ion_density, density, ionization, composition, helium
):
    """``(wanted, model)``: parameter -> dataset name for everything to read, and the ionization model.

    The thermal input comes first (it sets the reference shape). A string
    ``ionization`` that is not a model name names a hydrogen-fraction
    dataset; every field a model reads by name (``SuppliedFraction``) is a
    dataset too, under the parameter ``"model field <name>"``.
    """
    thermal, thermal_name = thermal_input(temperature, pressure, internal_energy)
    wanted = {
        thermal: thermal_name,
        "electron_density": electron_density,
        "ion_density": ion_density,
        "density": density,
    }
    model = None
    if density is not None:
        spec = ionization
        if isinstance(spec, str) and spec.strip().lower() not in RESERVED_NAMES:
            spec = SuppliedFraction(spec, composition, helium)
            composition = helium = None
        model = resolve_ionization(DEFAULT_MODEL if spec is None else spec, composition=composition, helium=helium)
        for name in model.field_names():
            wanted[MODEL_FIELD + name] = name
    elif ionization is not None:
        raise InputError("ionization: only used with density; electron_density was given directly")
    return wanted, model


def open_file(path):
    """Open an HDF5 file for reading; an unreadable file is an InputError naming it."""
    try:
        return h5py.File(path, "r")
    except OSError as exc:
        raise InputError(f"path: '{path}' cannot be opened as an HDF5 file ({exc})") from None


def file_geometry(handle, cell_size, origin, path):
    """Cell size and origin: the caller's, else the file's root attributes (origin may stay None)."""
    if cell_size is None:
        if "cell_size" not in handle.attrs:
            raise InputError(f"cell_size: not given and '{path}' has no root attribute 'cell_size'")
        cell_size = _root_length(handle, "cell_size", ("cell_size_units", "length_unit"), path)
    if origin is None and "origin" in handle.attrs:
        origin = _root_length(handle, "origin", ("origin_units", "length_unit", "cell_size_units"), path)
    return cell_size, origin


def parse_request(path, units, dtype, fields):
    """The parse step of :func:`read_hdf5` and :func:`~rtrace.io.open_hdf5`, before the file is opened.

    Parameters
    ----------
    path : str or os.PathLike
        Must name an existing file.
    units : dict or None
        Dataset name -> unit.
    dtype : numpy dtype
        float32 or float64.
    fields : dict
        The readers' ``temperature``, ``pressure``, ``internal_energy``,
        ``electron_density``, ``ion_density``, ``density``, ``ionization``,
        ``composition`` and ``helium`` arguments.

    Returns
    -------
    tuple
        ``(path, units, dtype, wanted, model)``: the path as a string, the
        units as a dict, the dtype, parameter -> dataset name for every
        dataset to read, and the ionization model (None without density).
    """
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise InputError(f"path: HDF5 file '{path}' not found")
    units = {} if units is None else dict(units)
    dtype = storage_dtype(dtype)
    wanted, model = wanted_fields(**fields)
    return path, units, dtype, checked_names(wanted, units), model


def _read_geometry(cell_size, origin, starts, subvolume):
    """Cell size and origin as Quantities (the origin moved to the sub-volume's first cell), checked."""
    cell = u.Quantity(cell_size)
    if not cell.unit.is_equivalent(u.cm):
        raise InputError(f"cell_size: expected a length, got unit '{cell.unit}'")
    if cell.size not in (1, 3):
        raise InputError(f"cell_size: expected a scalar or a 3-vector, got shape {cell.shape}")
    origin = u.Quantity(np.zeros(3) * u.cm if origin is None else origin)
    if not origin.unit.is_equivalent(u.cm):
        raise InputError(f"origin: expected a length, got unit '{origin.unit}'")
    if subvolume is not None:
        # The origin is the lower corner of cell (0, 0, 0) of the part read.
        origin = origin + starts * (cell.to(u.cm) * np.ones(3))
    return cell, origin


def _assemble(path, arrays, wanted, slices, subvolume, cell, origin, gamma, model, dtype):
    """The Snapshot of the arrays read (``Snapshot.from_arrays`` validates them and applies the model)."""
    source = f"hdf5:{path}"
    if subvolume is not None:
        source += " subvolume=[" + ", ".join(f"{s.start}:{s.stop}" for s in slices) + "]"
    fields = {
        wanted[p]: arrays.pop(p).to_value(u.dimensionless_unscaled) for p in list(arrays) if p.startswith(MODEL_FIELD)
    }
    return Snapshot.from_arrays(
        temperature=arrays.get("temperature"),
        pressure=arrays.get("pressure"),
        internal_energy=arrays.get("internal_energy"),
        gamma=gamma,
        cell_size=cell,
        electron_density=arrays.get("electron_density"),
        ion_density=arrays.get("ion_density"),
        density=arrays.get("density"),
        ionization=model,
        origin=origin,
        fields=fields or None,
        dtype=dtype,
        source=source,
    )


def read_hdf5(
    path,
    *,
    temperature=None,
    electron_density=None,
    ion_density=None,
    density=None,
    pressure=None,
    internal_energy=None,
    gamma=None,
    ionization=None,
    composition=None,
    helium=None,
    cell_size=None,
    origin=None,
    units=None,
    subvolume=None,
    dtype=np.float32,
):
    """Read a snapshot on a regular grid from an HDF5 file.

    Give either ``electron_density`` (and optionally ``ion_density``) with
    ``temperature``, or the mass ``density`` with an ``ionization`` model and
    one thermal input (``temperature``, ``pressure`` or ``internal_energy``),
    as for :meth:`rtrace.Snapshot.from_arrays`, which validates the values.

    Parameters
    ----------
    path : str or os.PathLike
        The HDF5 file.
    temperature, pressure, internal_energy : str, optional
        Name of the dataset of the one thermal input: temperature (any
        temperature unit), pressure or specific internal energy.
    electron_density, ion_density, density : str, optional
        Names of the electron density, ion term ``sum_i Z_i^2 n_i`` (number
        densities) and mass density datasets.
    gamma : float, optional
        Adiabatic index for ``internal_energy`` (default 5/3).
    ionization : str or IonizationModel, optional
        ``"full"``, ``"threshold"``, ``"saha"``, ``"collisional"`` or a
        model, used with ``density``. Any other string names a dataset
        holding the hydrogen ionized fraction; a ``SuppliedFraction`` whose
        fractions are dataset names (hydrogen, He II, He III) reads those
        datasets. Fractions need no unit (they must be dimensionless if
        they have one).
    composition, helium
        Passed to the ionization model.
    cell_size : `~astropy.units.Quantity`, optional
        Cell size (scalar or per axis). Default: root attribute
        ``cell_size`` with its unit from ``cell_size_units`` or
        ``length_unit``.
    origin : `~astropy.units.Quantity` (3,), optional
        Lower corner of the whole grid in the file. Default: root attribute
        ``origin`` (unit from ``origin_units``, ``length_unit`` or
        ``cell_size_units``), else zeros.
    units : dict of str to str or `~astropy.units.Unit`, optional
        Unit per dataset name; overrides the dataset's ``"units"`` attribute.
    subvolume : sequence of three (start, stop) pairs or slices, optional
        Cell-index range to read on each axis; only that part is read from
        disk, and the origin moves to the lower corner of the first cell read.
    dtype : numpy dtype, optional
        float32 (default) or float64 storage.

    Returns
    -------
    `~rtrace.Snapshot`
        With provenance source ``"hdf5:<path>"`` (plus the sub-volume).

    Raises
    ------
    InputError
        Missing file or dataset (the message lists the file's datasets),
        non-numeric or non-3D dataset, shapes that differ, missing or
        unparseable units, missing geometry, bad sub-volume; and every
        value check of :meth:`~rtrace.Snapshot.from_arrays`.
    """
    path, units, dtype, wanted, model = parse_request(
        path,
        units,
        dtype,
        dict(
            temperature=temperature,
            pressure=pressure,
            internal_energy=internal_energy,
            electron_density=electron_density,
            ion_density=ion_density,
            density=density,
            ionization=ionization,
            composition=composition,
            helium=helium,
        ),
    )
    with open_file(path) as handle:
        datasets, shape, field_units = open_fields(handle, wanted, units, path)
        cell_size, origin = file_geometry(handle, cell_size, origin, path)
        slices, starts = subvolume_slices(subvolume, shape)
        # Geometry is checked before any data is read: a mistake costs no I/O.
        cell, origin = _read_geometry(cell_size, origin, starts, subvolume)
        # With mass density, every input goes through the ionization model in float64;
        # number densities and temperatures given directly are stored as dtype.
        read_type = np.float64 if model is not None else dtype
        # h5py reads only the hyperslab and converts the type while reading.
        arrays = {
            param: u.Quantity(ds.astype(read_type)[slices], field_units[param], copy=False)
            for param, ds in datasets.items()
        }
    return _assemble(path, arrays, wanted, slices, subvolume, cell, origin, gamma, model, dtype)
