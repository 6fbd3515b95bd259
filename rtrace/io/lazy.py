"""Open a gridded HDF5 snapshot lazily: geometry at open, fields read brick by brick.

:func:`open_hdf5` takes the same arguments as :func:`rtrace.io.read_hdf5`
(dataset names, units from attributes or the caller, geometry from root
attributes) but reads no field into memory. It returns a
:class:`LazySnapshot`, which the tracer reads one brick at a time through an
:class:`HDF5Source` (h5py hyperslabs; for mass-density input the ionization
model is applied per piece, with the temperature derived from the pressure
or internal energy where the file holds those). An ``HDF5Source`` holds only
the path, the dataset names, units and model, so it is cheap to send to
another process: dask tasks read their own bricks (:mod:`rtrace.transfer.parallel`).
The one exception is photoionization by sources, which needs the whole grid:
it is solved at open (reading the file piece by piece) and its photoionized
fraction, one float32 cube, is kept with the source.

At open, a streaming pass over the datasets, in pieces of at most
``_SCAN_CELLS`` cells, does what :meth:`rtrace.Snapshot.from_arrays` does on
whole arrays: counts non-finite, negative and non-positive cells per field
(one InputError naming the field, the problem and the count, before any
tracing). A second pass (mass-density input) evaluates the model; together
they record each field's range, warn about relativistic temperatures and
compute the SHA-256 checksum, which equals that of the snapshot
:func:`~rtrace.io.read_hdf5` builds from the same file (same bytes, same
order).
"""

import hashlib
import os

import astropy.units as u
import h5py
import numpy as np

from ..errors import InputError
from ..gas import gamma_value, thermal_provenance
from ..physics.freefree import RELATIVISTIC_TEMPERATURE, warn_relativistic
from ..physics.ionization import IonizationModel
from ..physics.ionization.cells import THERMAL_INPUTS, IonizationSummary, evaluate_piece
from ..quantities import CellTally, check_density_inputs, parse_vector3
from ..snapshot import Snapshot, combined_checksum
from .hdf5 import (
    _FIELD_UNITS,
    _FRACTION_UNIT,
    MODEL_FIELD,
    file_geometry,
    open_fields,
    open_file,
    parse_request,
)

__all__ = ["open_hdf5", "LazySnapshot", "HDF5Source", "pieces"]

#: Cells per piece of the validation/checksum pass (8 MiB of float32, 16 MiB of float64).
_SCAN_CELLS = 1 << 21
#: Cells per piece when a brick goes through a unit conversion or the ionization model,
#: which bounds their temporaries (about 12 MB at most) whatever the brick size.
_PIECE_CELLS = 1 << 15
#: Bytes per piece cell of those temporaries: the inputs plus the model's own, up to 42
#: float64 arrays at its peak for Saha's solver (measured with tracemalloc; 4-7 for the
#: other models); 2 arrays for a unit conversion.
_PIECE_BYTES_DENSITY = 48 * 8
_PIECE_BYTES_DIRECT = 2 * 8

# Lower bound and strictness per stored field, as Snapshot.from_arrays checks them.
_BOUNDS = {
    "temperature": (0.0, True),
    "pressure": (0.0, True),
    "internal_energy": (0.0, True),
    "electron_density": (0.0, False),
    "ion_density": (0.0, False),
    "density": (0.0, False),
}


def pieces(lo, hi, max_cells):
    """Split the box ``lo <= index < hi`` into boxes of at most ``max_cells`` cells.

    The pieces keep the inner axes whole where they can and come in C order,
    so their bytes, concatenated, are the box's bytes in C order.

    Yields
    ------
    (lo, hi) : tuple of ndarray (3,) int64
    """
    lo = np.asarray(lo, np.int64)
    hi = np.asarray(hi, np.int64)
    n = hi - lo
    if n[1] * n[2] <= max_cells:
        step = max(1, max_cells // max(n[1] * n[2], 1))
        for i in range(lo[0], hi[0], step):
            yield np.array([i, lo[1], lo[2]]), np.array([min(i + step, hi[0]), hi[1], hi[2]])
    elif n[2] <= max_cells:
        step = max(1, max_cells // n[2])
        for i in range(lo[0], hi[0]):
            for j in range(lo[1], hi[1], step):
                yield np.array([i, j, lo[2]]), np.array([i + 1, min(j + step, hi[1]), hi[2]])
    else:
        for i in range(lo[0], hi[0]):
            for j in range(lo[1], hi[1]):
                for k in range(lo[2], hi[2], max_cells):
                    yield np.array([i, j, k]), np.array([i + 1, j + 1, min(k + max_cells, hi[2])])


def _slices(lo, hi):
    return tuple(slice(int(a), int(b)) for a, b in zip(lo, hi, strict=True))


def _box_text(lo, hi):
    return "[" + ", ".join(f"{int(a)}:{int(b)}" for a, b in zip(lo, hi, strict=True)) + "]"


class HDF5Source:
    """Read boxes of ``(n_e, ion term, T_e)`` from an HDF5 file (a brick source, see ``bricks``).

    Built by :func:`open_hdf5`. Picklable and small: it holds the path, dataset
    names, units and ionization model (and, for photoionization by sources,
    the photoionized fraction solved at open), and opens the file on every
    read, so each process (or dask task) reads only its own boxes.

    Attributes
    ----------
    path : str
    names : dict
        Dataset name per parameter (one thermal input, ``electron_density``,
        ``ion_density``, ``density``, and ``"model field <name>"`` for each
        field the ionization model reads).
    units : dict
        Unit per parameter.
    shape : tuple of int
    dtype : numpy dtype
        Storage type of the fields returned (float32 by default).
    thermal : str
        ``"temperature"``, ``"pressure"`` or ``"internal_energy"``.
    """

    #: Safe and cheap to ship to another process (no arrays inside, but for the photoionized fraction).
    portable = True

    def __init__(self, path, names, units, model, dtype, shape, gamma=None):
        self.path = path
        self.names = dict(names)
        self.units = dict(units)
        self.model = model
        self.dtype = np.dtype(dtype)
        self.shape = tuple(int(n) for n in shape)
        self.wide = "density" in self.names
        self.thermal = next(p for p in THERMAL_INPUTS if p in self.names)
        self.gamma = gamma
        self.photo = None

    @property
    def shares_ion_term(self):
        """True when the ion term is the electron density (no ion-density dataset, no model)."""
        return not self.wide and "ion_density" not in self.names

    @property
    def bytes_per_cell(self):
        """Bytes one brick cell costs when read: the stored fields plus the value checks' masks."""
        return self.dtype.itemsize * (2 if self.shares_ion_term else 3) + 2

    @property
    def scratch_bytes(self):
        """Bytes of temporaries per read, independent of the brick size."""
        return _PIECE_CELLS * (_PIECE_BYTES_DENSITY if self.wide else _PIECE_BYTES_DIRECT)

    @property
    def _temperature_as_stored(self):
        """The electron temperature is the temperature dataset itself (no model changes it)."""
        return (
            self.thermal == "temperature"
            and type(self.model).electron_temperature is IonizationModel.electron_temperature
        )

    def _open(self):
        if not os.path.isfile(self.path):
            raise InputError(f"path: HDF5 file '{self.path}' not found (it was there when opened)")
        try:
            return h5py.File(self.path, "r")
        except OSError as exc:
            raise InputError(f"path: '{self.path}' cannot be opened as an HDF5 file ({exc})") from None

    def _read_raw(self, handle, param, lo, hi, dtype, out=None):
        """Dataset ``param`` over the box, converted to ``dtype`` by HDF5 while reading (into ``out``)."""
        ds = handle[self.names[param]]
        if out is None:
            out = np.empty(tuple(int(b - a) for a, b in zip(lo, hi, strict=True)), dtype)
        if out.size:
            # same conversion as read_hdf5's ds.astype(dtype)[...]: HDF5 converts on read
            ds.read_direct(out, source_sel=_slices(lo, hi))
        return out

    def _to_cgs(self, param, arr):
        """``arr`` (in the dataset's unit) -> cgs, as Snapshot.from_arrays converts a Quantity."""
        unit = self.units[param]
        target, equivalencies = _FIELD_UNITS.get(param, _FRACTION_UNIT)
        if unit == target:
            return arr
        return u.Quantity(arr, unit, copy=False).to_value(target, equivalencies=equivalencies)

    def _direct(self, handle, param, lo, hi, out=None):
        """A number-density or temperature field stored as given, in ``dtype`` and cgs (into ``out``)."""
        out = self._read_raw(handle, param, lo, hi, self.dtype, out)
        if self.units[param] != _FIELD_UNITS[param][0]:
            # convert piece by piece so the temporaries stay small
            for plo, phi in pieces(np.zeros(3, np.int64), np.asarray(out.shape), _PIECE_CELLS):
                sl = _slices(plo, phi)
                out[sl] = self._to_cgs(param, out[sl])
        return out

    def _wide(self, handle, param, lo, hi):
        return np.ascontiguousarray(self._to_cgs(param, self._read_raw(handle, param, lo, hi, np.float64)), np.float64)

    def gas(self, handle, lo, hi, photo=True):
        """``(inputs, fields)`` of a box for the ionization model: float64 cgs arrays.

        ``inputs`` holds ``density``, the thermal input (and ``gamma``);
        ``fields`` the datasets the model reads by name and, once solved
        (and ``photo``), the photoionized fraction.
        """
        inputs = {
            "density": self._wide(handle, "density", lo, hi),
            self.thermal: self._wide(handle, self.thermal, lo, hi),
        }
        if self.thermal != "temperature":
            inputs["gamma"] = self.gamma
        fields = {self.names[p]: self._wide(handle, p, lo, hi) for p in self.names if p.startswith(MODEL_FIELD)}
        if photo and self.photo is not None:
            fields["<photo>"] = self.photo[_slices(lo, hi)]
        return inputs, fields

    def read(self, lo, hi, which=("electron_density", "ion_density", "temperature")):
        """Fields of the cells ``lo <= (i, j, k) < hi``: a tuple in the order of ``which``.

        Parameters
        ----------
        lo, hi : sequence of 3 int
            Box in global cell indices.
        which : tuple of str
            Any of ``"electron_density"``, ``"ion_density"`` (the ion term),
            ``"temperature"`` (the electron temperature).

        Returns
        -------
        tuple of ndarray
            C-contiguous ``dtype`` arrays of shape ``hi - lo`` in cm-3 and K.

        Raises
        ------
        InputError
            If the file is gone, or a value is out of range (the file was
            validated at open, so it changed since).
        """
        shape = tuple(int(b - a) for a, b in zip(lo, hi, strict=True))
        params = ["electron_density" if name == "ion_density" and self.shares_ion_term else name for name in which]
        distinct = list(dict.fromkeys(params))
        # One buffer for all fields: a single large allocation is mapped afresh and handed
        # back whole when the brick is dropped, where separate arrays of a few MB would be
        # carved from the heap and fragment it (the process would outgrow its budget).
        buffer = np.empty((len(distinct),) + shape, self.dtype)
        field = {param: buffer[n] for n, param in enumerate(distinct)}
        out = [field[param] for param in params]
        with self._open() as handle:
            if not self.wide:
                for param in distinct:
                    self._direct(handle, param, lo, hi, field[param])
            elif set(which) == {"temperature"} and self._temperature_as_stored:
                out[0][...] = self._wide(handle, "temperature", lo, hi)
                for arr in out[1:]:
                    arr[...] = out[0]
            else:
                zero = np.zeros(3, np.int64)
                for plo, phi in pieces(zero, np.asarray(shape), _PIECE_CELLS):
                    glo, ghi = np.asarray(lo) + plo, np.asarray(lo) + phi
                    t_e, ne, ni = evaluate_piece(self.model, *self.gas(handle, glo, ghi))
                    values = {"electron_density": ne, "ion_density": ni, "temperature": t_e}
                    for arr, name in zip(out, which, strict=True):
                        arr[_slices(plo, phi)] = values[name]
        for arr, name in zip(out, which, strict=True):
            self._recheck(name, arr, lo, hi)
        return tuple(out)

    def _recheck(self, name, arr, lo, hi):
        """Cheap guard: the file was validated at open; a bad value now means it changed."""
        lower, strict = _BOUNDS[name]
        bad = arr.size - int(np.count_nonzero(arr > lower if strict else arr >= lower))  # NaN fails both
        if bad:
            raise InputError(
                f"{name}: {bad} of {arr.size} cells of brick {_box_text(lo, hi)} are not finite "
                f"or violate {name} {'>' if strict else '>='} 0, though '{self.path}' passed "
                "validation when it was opened; was the file changed since?"
            )


class _OpenGrid:
    """The source's file, held open, as a grid reader for models that solve the whole grid (sources)."""

    def __init__(self, source, handle, cell_size, origin):
        self.source, self.handle = source, handle
        self.shape = source.shape
        self.cell_size, self.origin = cell_size, origin
        self.thermal = source.thermal

    def read(self, lo, hi):
        return self.source.gas(self.handle, lo, hi, photo=False)


class LazySnapshot(Snapshot):
    """A :class:`~rtrace.Snapshot` whose fields stay in an HDF5 file until a brick is needed.

    Made by :func:`open_hdf5`. Shape, geometry, units, provenance, field
    ranges and the checksum are known from the open; the tracer reads the
    fields brick by brick through :meth:`field_source`.

    ``temperature``, ``electron_density``, ``ion_density`` (and ``_t``,
    ``_ne``, ``_ni``) read the *whole* field from the file on every access
    (with mass-density input, through the ionization model): that costs one
    full field in memory and one pass over the dataset(s).
    """

    in_memory = False

    def __init__(self, source, cell_size, origin, provenance, ranges, checksum):
        self._source = source
        self.shape = source.shape
        self.cell_size = np.asarray(cell_size, float)
        self.origin = np.asarray(origin, float)
        self.provenance = dict(provenance)
        self._ranges = dict(ranges)
        self._checksum = checksum

    def field_source(self):
        """The file as a brick source (:class:`HDF5Source`)."""
        return self._source

    def _whole(self, name):
        zero = (0, 0, 0)
        return self._source.read(zero, self.shape, which=(name,))[0]

    @property
    def _t(self):
        return self._whole("temperature")

    @property
    def _ne(self):
        return self._whole("electron_density")

    @property
    def _ni(self):
        return self._whole("ion_density")

    def checksum(self):
        """SHA-256 of the fields and geometry, computed by the streaming pass at open.

        Equal to :meth:`rtrace.Snapshot.checksum` of the snapshot
        :func:`~rtrace.io.read_hdf5` builds from the same file and arguments.
        """
        return self._checksum

    _describe_note = " (file-backed: fields are read brick by brick)"

    def _field_ranges(self):
        """The ranges recorded by the pass at open (reads nothing)."""
        return [self._ranges[name] for name in ("temperature", "electron_density", "ion_density")]

    def __repr__(self):
        return f"<Snapshot shape={self.shape} source={self.provenance['source']!r} file-backed>"


# -- the streaming pass at open ----------------------------------------------------------------


def _tally(name, dataset, path, lower=None, strict=False, upper=None, rule=None):
    """A :class:`~rtrace.quantities.CellTally` of one dataset over the pieces of the streaming pass."""
    return CellTally(
        name,
        lower,
        strict,
        upper,
        rule=rule,
        context=f", in dataset '{dataset}' of '{path}' (found by open_hdf5's validation pass; nothing was traced)",
    )


def _validate_direct(source, handle, digests, ranges):
    """Electron density, ion term and temperature stored as given: validate, record ranges, hash."""
    zero, shape = np.zeros(3, np.int64), np.asarray(source.shape, np.int64)
    for param in ("temperature", "electron_density", "ion_density"):
        if param == "ion_density" and source.shares_ion_term:
            # the ion term is n_e: the same bytes, as Snapshot.checksum hashes the shared array
            digests[param] = digests["electron_density"].copy()
            ranges[param] = ranges["electron_density"]
            continue
        lower, strict = _BOUNDS[param]
        tally = _tally(param, source.names[param], source.path, lower, strict)
        hot = 0
        for plo, phi in pieces(zero, shape, _SCAN_CELLS):
            arr = source._direct(handle, param, plo, phi)
            if tally.add(arr):
                digests[param].update(memoryview(np.ascontiguousarray(arr, source.dtype)).cast("B"))
            if param == "temperature":
                hot += int(np.count_nonzero(arr >= RELATIVISTIC_TEMPERATURE))
        tally.raise_if_bad()
        ranges[param] = (tally.min, tally.max)
        if hot:
            warn_relativistic(hot)


def _validate_gas(source, handle):
    """Mass density, the thermal input and the model's fields: validate every cell, piece by piece."""
    zero, shape = np.zeros(3, np.int64), np.asarray(source.shape, np.int64)
    tally_rho = _tally("density", source.names["density"], source.path, 0.0)
    tally_heat = _tally(source.thermal, source.names[source.thermal], source.path, 0.0, strict=True)
    fields = [p for p in source.names if p.startswith(MODEL_FIELD)]
    tally_fields = {
        p: _tally(
            f"ionization field '{source.names[p]}'",
            source.names[p],
            source.path,
            0.0,
            upper=1.0,
            rule="0 <= fraction <= 1",
        )
        for p in fields
    }
    helium = [MODEL_FIELD + getattr(source.model, "_sources", {}).get(n, "") for n in ("helium_ii", "helium_iii")]
    helium_pair = all(p in source.names for p in helium)
    excess, largest, empty = 0, 0.0, 0
    for plo, phi in pieces(zero, shape, _SCAN_CELLS):
        rho = source._wide(handle, "density", plo, phi)
        tally_rho.add(rho)
        if source.thermal != "temperature":
            empty += int(np.count_nonzero(rho == 0.0))
        tally_heat.add(source._wide(handle, source.thermal, plo, phi))
        values = {p: source._wide(handle, p, plo, phi) for p in fields}
        for p in fields:
            tally_fields[p].add(values[p])
        if helium_pair:
            n_bad, top = source.model.excess_helium(values[helium[0]], values[helium[1]])
            excess, largest = excess + n_bad, max(largest, top)
    # in the order Snapshot.from_arrays checks them
    tally_rho.raise_if_bad()
    tally_heat.raise_if_bad()
    if empty:
        raise InputError(
            f"density: {empty} of {tally_rho.size} cells are empty (density 0), where a "
            f"temperature cannot be derived from the {source.thermal.replace('_', ' ')}, in dataset "
            f"'{source.names['density']}' of '{source.path}'"
        )
    for tally in tally_fields.values():
        tally.raise_if_bad()
    if excess:
        raise source.model.helium_sum_error(excess, tally_rho.size, largest)


def _evaluate_gas(source, handle, digests, ranges):
    """Every cell through the model, piece by piece: ranges, checksum, temperature warning, summary."""
    zero, shape = np.zeros(3, np.int64), np.asarray(source.shape, np.int64)
    names = ("temperature", "electron_density", "ion_density")
    tallies = {p: CellTally(p) for p in names}
    summary = IonizationSummary()
    hot = 0
    for plo, phi in pieces(zero, shape, _PIECE_CELLS):
        values = evaluate_piece(source.model, *source.gas(handle, plo, phi), summary=summary)
        for param, value in zip(names, values, strict=True):
            stored = np.ascontiguousarray(value, source.dtype)
            tallies[param].add(stored)
            digests[param].update(memoryview(stored).cast("B"))
        hot += int(np.count_nonzero(values[0] >= RELATIVISTIC_TEMPERATURE))
    for param in names:
        ranges[param] = (tallies[param].min, tallies[param].max)
    source.model.warn_range()
    warn_relativistic(hot)
    return summary.describe()


def _scan(source, cell, origin):
    """Validate every field, solve what the model needs, record ranges and the checksum.

    Returns ``(ranges, checksum, provenance entries)``.
    """
    digests = {p: hashlib.sha256() for p in ("temperature", "electron_density", "ion_density")}
    ranges, extra = {}, {}
    with source._open() as handle:
        if not source.wide:
            _validate_direct(source, handle, digests, ranges)
        else:
            _validate_gas(source, handle)
            if not source.model.local:
                solution = source.model.photoionize(_OpenGrid(source, handle, cell, origin))
                source.photo = solution.fraction
                extra.update(solution.provenance())
            extra["ionization_state"] = _evaluate_gas(source, handle, digests, ranges)
    checksum = combined_checksum([digests[p] for p in ("temperature", "electron_density", "ion_density")], cell, origin)
    return ranges, checksum, extra


# -- open_hdf5 ---------------------------------------------------------------------------------


def open_hdf5(
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
    dtype=np.float32,
):
    """Open a snapshot on a regular grid in an HDF5 file without reading its fields into memory.

    The arguments mean what they mean for :func:`rtrace.io.read_hdf5`: give
    either ``electron_density`` (and optionally ``ion_density``) with
    ``temperature``, or the mass ``density`` with an ``ionization`` model and
    one thermal input (``temperature``, ``pressure`` or ``internal_energy``).

    Parameters
    ----------
    path : str or os.PathLike
        The HDF5 file. It must not change while the snapshot is in use.
    temperature, pressure, internal_energy : str, optional
        Name of the dataset of the one thermal input.
    electron_density, ion_density, density : str, optional
        Names of the electron density, ion term ``sum_i Z_i^2 n_i`` and mass
        density datasets.
    gamma : float, optional
        Adiabatic index for ``internal_energy`` (default 5/3).
    ionization : str, float or IonizationModel, optional
        ``"full"`` (default with ``density``), ``"threshold"``, ``"saha"``,
        ``"collisional"``, a model (``IonizingSources`` is solved at open,
        reading the file piece by piece; ``SuppliedFraction`` with dataset
        names reads those), a uniform hydrogen ionized fraction, or the name
        of a dataset holding the fraction. An in-memory fraction array is
        not accepted (store it in the file).
    composition, helium
        Passed to the ionization model.
    cell_size : `~astropy.units.Quantity`, optional
        Cell size (scalar or per axis); default: root attribute ``cell_size``.
    origin : `~astropy.units.Quantity` (3,), optional
        Lower corner of the grid; default: root attribute ``origin``, else zeros.
    units : dict of str to str or `~astropy.units.Unit`, optional
        Unit per dataset name; overrides the dataset's ``"units"`` attribute.
    dtype : numpy dtype, optional
        float32 (default) or float64: the type bricks are read as.

    Returns
    -------
    `LazySnapshot`
        A :class:`~rtrace.Snapshot` with ``in_memory = False``; provenance
        source ``"hdf5:<path>"``.

    Raises
    ------
    InputError
        Everything :func:`~rtrace.io.read_hdf5` rejects, found by a streaming
        validation pass before this returns (see the module notes for its cost).

    Warns
    -----
    PhysicsRangeWarning
        Temperatures above 1e9 K; a model used outside its validity.
    """
    check_density_inputs(density, electron_density, ion_density, pressure, internal_energy)
    if isinstance(ionization, (np.ndarray, u.Quantity)) and np.ndim(ionization) > 0:
        raise InputError(
            "ionization: an in-memory fraction array cannot be read brick by brick; store it "
            "as a dataset in the file and pass its name (or use read_hdf5)"
        )
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
    gamma_used = _streamed_model(model, wanted, gamma)

    with open_file(path) as handle:
        datasets, shape, field_units = open_fields(handle, wanted, units, path)
        cell_size, origin = file_geometry(handle, cell_size, origin, path)
    cell, org = _lazy_geometry(cell_size, origin)
    if model is not None and not model.local:
        model.check_geometry(shape, cell, org)  # sources outside the grid: an error before any reading

    source = HDF5Source(path, wanted, field_units, model, dtype, shape, gamma_used)
    ranges, checksum, extra = _scan(source, cell, org)
    return LazySnapshot(source, cell, org, _provenance(source, ion_density, gamma_used, extra), ranges, checksum)


def _streamed_model(model, wanted, gamma):
    """The adiabatic index a streamed model uses (None with a temperature); refuse in-memory model arrays."""
    if model is not None and any(np.ndim(a) > 0 for a in model.cell_arrays().values()):
        raise InputError(
            "ionization: a model holding in-memory arrays cannot be read brick by brick; give it "
            "the names of datasets in the file instead"
        )
    if model is not None and "temperature" not in wanted:
        return gamma_value(gamma)
    if gamma is not None:
        raise InputError("gamma: only used with pressure or internal_energy (and density)")
    return None


def _lazy_geometry(cell_size, origin):
    """Cell size and origin as 3-vectors in cm; the cell size finite and positive."""
    cell = parse_vector3(cell_size, "cell_size", u.cm)
    if not np.all(np.isfinite(cell) & (cell > 0)):
        raise InputError(f"cell_size: must be finite and positive, got {cell} cm")
    return cell, np.zeros(3) if origin is None else parse_vector3(origin, "origin", u.cm)


def _provenance(source, ion_density, gamma_used, extra):
    """The LazySnapshot's provenance: file, ionization, thermal input, and the scan's entries."""
    if source.model is not None:
        ionization_text = source.model.describe()
    elif ion_density is None:
        ionization_text = "supplied n_e; ion term = n_e"
    else:
        ionization_text = "supplied n_e and ion term"
    provenance = {"source": f"hdf5:{source.path}", "ionization": ionization_text, **extra}
    if source.thermal != "temperature":
        provenance["temperature"] = thermal_provenance(source.thermal, gamma_used)
    return provenance
