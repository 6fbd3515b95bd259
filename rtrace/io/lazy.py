"""Open a gridded HDF5 snapshot lazily: geometry at open, fields read brick by brick.

:func:`open_hdf5` takes the same arguments as :func:`rtrace.io.read_hdf5`
(dataset names, units from attributes or the caller, geometry from root
attributes) but reads no field into memory. It returns a
:class:`LazySnapshot`, which the tracer reads one brick at a time through an
:class:`HDF5Source` (h5py hyperslabs; the ionization model applied per
piece for mass-density input). An ``HDF5Source`` holds only the path, the
dataset names, units and model, so it is cheap to send to another process:
dask tasks read their own bricks (:mod:`rtrace.parallel`).

At open, one streaming pass over the datasets, in pieces of at most
``_SCAN_CELLS`` cells, does what :meth:`rtrace.Snapshot.from_arrays` does on
whole arrays: counts non-finite, negative and non-positive-temperature cells
per field (one InputError naming the field, the problem and the count, before
any tracing), warns about relativistic temperatures, and records each field's
range and the SHA-256 checksum, which equals that of the snapshot
:func:`~rtrace.io.read_hdf5` builds from the same file (same bytes, same
order). The pass reads each dataset once (``n_e`` twice when it is also the
ion term); with mass-density input it reads the temperature three times, the
density and the ionized fraction three times, and evaluates the ionization
model twice.
"""

import hashlib
import os
import warnings

import astropy.units as u
import h5py
import numpy as np

from ..errors import InputError, PhysicsRangeWarning
from ..physics.constants import PC
from ..physics.freefree import RELATIVISTIC_TEMPERATURE
from ..snapshot import Snapshot, _vector3
from .hdf5 import _FIELD_UNITS, _MODEL_NAMES, checked_names, file_geometry, open_fields, open_file

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
_BOUNDS = {"temperature": (0.0, True), "electron_density": (0.0, False),
           "ion_density": (0.0, False), "density": (0.0, False)}


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
    return tuple(slice(int(a), int(b)) for a, b in zip(lo, hi))


def _box_text(lo, hi):
    return "[" + ", ".join(f"{int(a)}:{int(b)}" for a, b in zip(lo, hi)) + "]"


class HDF5Source:
    """Read boxes of ``(n_e, ion term, T_e)`` from an HDF5 file (a brick source, see ``bricks``).

    Built by :func:`open_hdf5`. Picklable and small: it holds the path, dataset
    names, units and ionization model, and opens the file on every read, so
    each process (or dask task) reads only its own boxes.

    Attributes
    ----------
    path : str
    names : dict
        Dataset name per parameter (``temperature``, ``electron_density``,
        ``ion_density``, ``density``, ``ionization``).
    units : dict
        Unit per parameter.
    shape : tuple of int
    dtype : numpy dtype
        Storage type of the fields returned (float32 by default).
    """

    #: Safe and cheap to ship to another process (no arrays inside).
    portable = True

    def __init__(self, path, names, units, model, fraction_name, dtype, shape):
        self.path = path
        self.names = dict(names)
        self.units = dict(units)
        self.model = model
        self.fraction_name = fraction_name
        self.dtype = np.dtype(dtype)
        self.shape = tuple(int(n) for n in shape)
        self.wide = "density" in self.names

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
            out = np.empty(tuple(int(b - a) for a, b in zip(lo, hi)), dtype)
        if out.size:
            # same conversion as read_hdf5's ds.astype(dtype)[...]: HDF5 converts on read
            ds.read_direct(out, source_sel=_slices(lo, hi))
        return out

    def _to_cgs(self, param, arr):
        """``arr`` (in the dataset's unit) -> cgs, as Snapshot.from_arrays converts a Quantity."""
        unit = self.units[param]
        target, equivalencies = _FIELD_UNITS[param]
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

    def _wide_inputs(self, handle, lo, hi, params):
        """float64 cgs ``temperature``, ``density``, ``ionization`` (those in ``params``) over a box."""
        return {p: np.ascontiguousarray(self._to_cgs(p, self._read_raw(handle, p, lo, hi, np.float64)),
                                        np.float64)
                for p in params if p in self.names}

    def _model_terms(self, inputs):
        """``(n_e, ion term)`` float64 from mass density, temperature and (maybe) the ionized fraction."""
        fields = {}
        if self.fraction_name is not None:
            fields[self.fraction_name] = inputs["ionization"]
        try:
            return self.model.electron_and_ion_terms(inputs["density"], inputs["temperature"], fields)
        except ValueError as exc:
            raise InputError(f"ionization: {exc}") from None

    def read(self, lo, hi, which=("electron_density", "ion_density", "temperature")):
        """Fields of the cells ``lo <= (i, j, k) < hi``: a tuple in the order of ``which``.

        Parameters
        ----------
        lo, hi : sequence of 3 int
            Box in global cell indices.
        which : tuple of str
            Any of ``"electron_density"``, ``"ion_density"`` (the ion term),
            ``"temperature"``.

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
        shape = tuple(int(b - a) for a, b in zip(lo, hi))
        params = ["electron_density" if name == "ion_density" and self.shares_ion_term else name
                  for name in which]
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
            else:
                zero = np.zeros(3, np.int64)
                for plo, phi in pieces(zero, np.asarray(shape), _PIECE_CELLS):
                    glo, ghi = np.asarray(lo) + plo, np.asarray(lo) + phi
                    need = ("temperature", "density", "ionization") if set(which) - {"temperature"} \
                        else ("temperature",)
                    inputs = self._wide_inputs(handle, glo, ghi, need)
                    ne, ni = self._model_terms(inputs) if "density" in inputs else (None, None)
                    values = {"electron_density": ne, "ion_density": ni, "temperature": inputs["temperature"]}
                    for arr, name in zip(out, which):
                        arr[_slices(plo, phi)] = values[name]
        for arr, name in zip(out, which):
            self._recheck(name, arr, lo, hi)
        return tuple(out)

    def _recheck(self, name, arr, lo, hi):
        """Cheap guard: the file was validated at open; a bad value now means it changed."""
        lower, strict = _BOUNDS[name]
        bad = arr.size - int(np.count_nonzero(arr > lower if strict else arr >= lower))   # NaN fails both
        if bad:
            raise InputError(f"{name}: {bad} of {arr.size} cells of brick {_box_text(lo, hi)} are not finite "
                             f"or violate {name} {'>' if strict else '>='} 0, though '{self.path}' passed "
                             "validation when it was opened; was the file changed since?")


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

    def describe(self):
        """Multi-line summary: shape, geometry, field ranges (from the pass at open; reads nothing)."""
        lines = [f"Snapshot {self.shape[0]}x{self.shape[1]}x{self.shape[2]} from {self.provenance['source']} "
                 "(file-backed: fields are read brick by brick)",
                 f"  cell size  {', '.join(f'{c / PC:.4g}' for c in self.cell_size)} pc",
                 f"  ionization {self.provenance.get('ionization', '?')}"]
        for label, name, unit in (("T_e", "temperature", "K"), ("n_e", "electron_density", "cm-3"),
                                  ("ion term", "ion_density", "cm-3")):
            lo, hi = self._ranges[name]
            lines.append(f"  {label:<10} {lo:.4g} .. {hi:.4g} {unit}")
        return "\n".join(lines)

    def __repr__(self):
        return f"<Snapshot shape={self.shape} source={self.provenance['source']!r} file-backed>"


# -- the streaming pass at open ----------------------------------------------------------------

class _Tally:
    """Counts and range of one field over the pieces of a streaming pass."""

    def __init__(self, name, dataset):
        self.name, self.dataset = name, dataset
        self.size = self.nonfinite = self.low = self.hot = 0
        self.min, self.max = np.inf, -np.inf

    def add(self, arr, lower=None, strict=False, hot=False):
        finite = np.isfinite(arr)
        self.size += arr.size
        self.nonfinite += arr.size - int(np.count_nonzero(finite))
        if arr.size:
            self.min = min(self.min, float(np.min(arr, where=finite, initial=np.inf)))
            self.max = max(self.max, float(np.max(arr, where=finite, initial=-np.inf)))
        if lower is not None:
            self.low += int(np.count_nonzero(finite & ((arr <= lower) if strict else (arr < lower))))
        if hot:
            self.hot += int(np.count_nonzero(arr > RELATIVISTIC_TEMPERATURE))
        return self.nonfinite == 0 and self.low == 0

    def raise_if_bad(self, path, rule):
        """One InputError with every count, in the wording of Snapshot.from_arrays."""
        problems = []
        if self.nonfinite:
            problems.append(f"{self.nonfinite} of {self.size} cells are not finite (NaN or inf)")
        if self.low:
            count = f"{self.low}" if problems else f"{self.low} of {self.size} cells"
            problems.append(f"{count} violate {rule} (minimum {self.min:.6g})")
        if problems:
            raise InputError(f"{self.name}: {' and '.join(problems)}, in dataset '{self.dataset}' of '{path}' "
                             "(found by open_hdf5's validation pass; nothing was traced)")


def _hash(h, arr, dtype):
    h.update(memoryview(np.ascontiguousarray(arr, dtype)).cast("B"))


def _scan(source):
    """Validate every field, record ranges and the checksum; returns ``(ranges, sha256)``."""
    h = hashlib.sha256()
    zero, shape = np.zeros(3, np.int64), np.asarray(source.shape, np.int64)
    names, path = source.names, source.path
    ranges = {}
    with source._open() as handle:
        if not source.wide:
            for param in ("temperature", "electron_density", "ion_density"):
                if param == "ion_density" and source.shares_ion_term:
                    # the ion term is n_e: hashed twice, as Snapshot.checksum hashes the shared array
                    for plo, phi in pieces(zero, shape, _SCAN_CELLS):
                        _hash(h, source._direct(handle, "electron_density", plo, phi), source.dtype)
                    ranges[param] = ranges["electron_density"]
                    continue
                lower, strict = _BOUNDS[param]
                tally = _Tally(param, names[param])
                for plo, phi in pieces(zero, shape, _SCAN_CELLS):
                    arr = source._direct(handle, param, plo, phi)
                    if tally.add(arr, lower, strict, hot=param == "temperature"):
                        _hash(h, arr, source.dtype)
                tally.raise_if_bad(path, f"{param} {'>' if strict else '>='} 0")
                ranges[param] = (tally.min, tally.max)
                if param == "temperature":
                    _warn_hot(tally.hot)
        else:
            # pass 1: temperature, validated, stored as dtype and hashed
            tally_t = _Tally("temperature", names["temperature"])
            for plo, phi in pieces(zero, shape, _SCAN_CELLS):
                t64 = source._wide_inputs(handle, plo, phi, ("temperature",))["temperature"]
                if tally_t.add(t64, 0.0, True, hot=True):
                    _hash(h, t64, source.dtype)
            tally_t.raise_if_bad(path, "temperature > 0")
            _warn_hot(tally_t.hot)
            # the range of the stored (rounded) values: rounding is monotone
            ranges["temperature"] = tuple(float(np.asarray(v, source.dtype)) for v in (tally_t.min, tally_t.max))
            # pass 2: the mass density and the ionized fraction, in the order from_arrays checks them
            tally_rho = _Tally("density", names["density"])
            tally_x = _Tally("ionization", names.get("ionization"))
            for plo, phi in pieces(zero, shape, _SCAN_CELLS):
                inputs = source._wide_inputs(handle, plo, phi, ("density", "ionization"))
                tally_rho.add(inputs["density"], 0.0, False)
                if "ionization" in inputs:
                    x = inputs["ionization"]
                    tally_x.add(x, 0.0, False)
                    tally_x.low += int(np.count_nonzero(np.isfinite(x) & (x > 1.0)))
            tally_rho.raise_if_bad(path, "density >= 0")
            if "ionization" in names:
                tally_x.raise_if_bad(path, "0 <= ionized fraction <= 1")
            # passes 3 and 4: n_e, then the ion term, through the model (small pieces: the
            # models' temporaries are tens of float64 arrays)
            for index, param in enumerate(("electron_density", "ion_density")):
                tally = _Tally(param, "(ionization model)")
                for plo, phi in pieces(zero, shape, _PIECE_CELLS):
                    inputs = source._wide_inputs(handle, plo, phi, ("temperature", "density", "ionization"))
                    stored = np.ascontiguousarray(source._model_terms(inputs)[index], source.dtype)
                    tally.add(stored)
                    _hash(h, stored, source.dtype)
                ranges[param] = (tally.min, tally.max)
    return ranges, h


def _warn_hot(n_hot):
    if n_hot:
        # the same warning Snapshot.from_arrays gives through check_temperature_range
        warnings.warn(f"temperature: {n_hot} cell(s) above {RELATIVISTIC_TEMPERATURE:.0e} K, where the "
                      "non-relativistic free-free treatment loses accuracy", PhysicsRangeWarning, stacklevel=3)


# -- open_hdf5 ---------------------------------------------------------------------------------

def open_hdf5(path, *, temperature, electron_density=None, ion_density=None, density=None,
              ionization=None, composition=None, helium=None, cell_size=None, origin=None,
              units=None, dtype=np.float32):
    """Open a snapshot on a regular grid in an HDF5 file without reading its fields into memory.

    The arguments mean what they mean for :func:`rtrace.io.read_hdf5`: give
    either ``electron_density`` (and optionally ``ion_density``) or the mass
    ``density`` with an ``ionization`` model.

    Parameters
    ----------
    path : str or os.PathLike
        The HDF5 file. It must not change while the snapshot is in use.
    temperature : str
        Name of the electron-temperature dataset (any temperature unit).
    electron_density, ion_density, density : str, optional
        Names of the electron density, ion term ``sum_i Z_i^2 n_i`` and mass
        density datasets.
    ionization : str, float or IonizationModel, optional
        ``"full"`` (default with ``density``), ``"threshold"``, ``"saha"``, a
        model, a uniform hydrogen ionized fraction, or the name of a dataset
        holding the fraction. Applied per brick. An in-memory fraction array
        is not accepted (store it in the file).
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
        Temperatures above 1e9 K.
    """
    path = os.fspath(path)
    if not os.path.isfile(path):
        raise InputError(f"path: HDF5 file '{path}' not found")
    units = {} if units is None else dict(units)
    try:
        dtype = np.dtype(dtype)
    except TypeError:
        raise InputError(f"dtype: not a numpy dtype: {dtype!r}") from None
    if dtype not in (np.float32, np.float64):
        raise InputError(f"dtype: must be float32 or float64, got {dtype}")
    if density is not None and (electron_density is not None or ion_density is not None):
        raise InputError("density: give either density (with ionization) or electron_density, not both")
    if density is None and electron_density is None:
        raise InputError("electron_density: required unless density and ionization are given")
    if density is None and ionization is not None:
        raise InputError("ionization: only used with density; electron_density was given directly")

    from ..physics.ionization import SuppliedFraction, resolve_ionization
    wanted = {"temperature": temperature, "electron_density": electron_density,
              "ion_density": ion_density, "density": density}
    fraction_name = None
    model = None
    if density is not None:
        if isinstance(ionization, str) and ionization.strip().lower() not in _MODEL_NAMES:
            fraction_name = ionization
            model = SuppliedFraction(fraction_name, composition, helium or "follow")
        elif isinstance(ionization, (np.ndarray, u.Quantity)) and np.ndim(ionization) > 0:
            raise InputError("ionization: an in-memory fraction array cannot be read brick by brick; store it "
                             "as a dataset in the file and pass its name (or use read_hdf5)")
        else:
            try:
                model = resolve_ionization("full" if ionization is None else ionization,
                                           composition=composition, helium=helium)
            except (TypeError, ValueError) as exc:
                raise InputError(f"ionization: {exc}") from None
            if isinstance(model, SuppliedFraction) and model.field_name is not None:
                fraction_name = model.field_name
            elif isinstance(model, SuppliedFraction) and np.ndim(model.fraction) > 0:
                raise InputError("ionization: a SuppliedFraction holding an in-memory array cannot be read "
                                 "brick by brick; give it the name of a dataset in the file instead")
        if fraction_name is not None:
            wanted["ionization"] = fraction_name
    wanted = checked_names(wanted, units)

    with open_file(path) as handle:
        datasets, shape, field_units = open_fields(handle, wanted, units, path)
        cell_size, origin = file_geometry(handle, cell_size, origin, path)
    cell = _vector3(cell_size, "cell_size", u.cm)
    if not np.all(np.isfinite(cell) & (cell > 0)):
        raise InputError(f"cell_size: must be finite and positive, got {cell} cm")
    org = np.zeros(3) if origin is None else _vector3(origin, "origin", u.cm)

    source = HDF5Source(path, wanted, field_units, model, fraction_name, dtype, shape)
    ranges, h = _scan(source)
    for arr in (cell, org):
        h.update(memoryview(np.ascontiguousarray(arr)).cast("B"))
    if model is not None:
        ionization_text = model.describe()
    elif ion_density is None:
        ionization_text = "supplied n_e; ion term = n_e"
    else:
        ionization_text = "supplied n_e and ion term"
    provenance = {"source": f"hdf5:{path}", "ionization": ionization_text}
    return LazySnapshot(source, cell, org, provenance, ranges, h.hexdigest())
