"""Snapshot: the gridded fields the transfer needs, their geometry and provenance.

A Snapshot holds the electron density ``n_e``, the ion term
``sum_i Z_i^2 n_i`` and the electron temperature ``T_e`` on a regular grid,
stored as float32 (float64 on request) in cgs units. Readers and ionization
models produce these from whatever a simulation stores; the tracer never
sees mass density or composition.

Geometry: arrays are indexed ``[i, j, k]`` <-> ``(x, y, z)``; cell
``(i, j, k)`` spans ``[origin + i dx, origin + (i + 1) dx)`` on each axis.
"""

import hashlib

import astropy.units as u
import numpy as np

from .errors import InputError
from .physics.constants import PC
from .physics.freefree import check_temperature_range

__all__ = ["Snapshot"]


def _to_array(value, unit, name, dtype, equivalencies=None):
    """Quantity (or plain array, taken to be in ``unit``) -> ndarray in ``unit``."""
    if isinstance(value, u.Quantity):
        if not value.unit.is_equivalent(unit, equivalencies=equivalencies or []):
            raise InputError(f"{name}: expected units of {unit}, got '{value.unit}'")
        value = value.to_value(unit, equivalencies=equivalencies or [])
    return np.ascontiguousarray(value, dtype=dtype)


def _check(name, arr, shape, lower, strict):
    """Validate one field: shape, finiteness, lower bound. The message counts bad cells."""
    if arr.shape != shape:
        raise InputError(f"{name}: shape {arr.shape} does not match the grid shape {shape}")
    n_bad = arr.size - int(np.count_nonzero(np.isfinite(arr)))
    if n_bad:
        raise InputError(f"{name}: {n_bad} of {arr.size} cells are not finite (NaN or inf)")
    n_bad = int(np.count_nonzero(arr <= lower if strict else arr < lower))
    if n_bad:
        rel = "> 0" if strict else ">= 0"
        raise InputError(f"{name}: {n_bad} of {arr.size} cells violate {name} {rel} "
                         f"(minimum {float(arr.min()):.6g})")


def _vector3(value, name, unit):
    q = u.Quantity(value)
    if not q.unit.is_equivalent(unit):
        raise InputError(f"{name}: expected a length, got unit '{q.unit}'")
    vec = np.broadcast_to(np.asarray(q.to_value(unit), float), (3,)).copy() if q.ndim == 0 \
        else np.asarray(q.to_value(unit), float).reshape(-1)
    if vec.shape != (3,):
        raise InputError(f"{name}: expected a scalar or a 3-vector, got shape {q.shape}")
    return vec


def derive_terms(t, electron_density=None, ion_density=None, density=None, ionization=None, composition=None,
                 helium=None, fields=None, dtype=np.float32):
    """``(T, n_e, ion term, description)`` as ``dtype`` arrays from validated temperatures ``t`` (K).

    Either ``electron_density`` (and optionally ``ion_density``, which
    defaults to the same array) or the mass ``density`` with an
    ``ionization`` model (see :meth:`Snapshot.from_arrays`). Each field is
    validated against ``t.shape`` before use.
    """
    shape = t.shape
    if density is not None:
        if electron_density is not None or ion_density is not None:
            raise InputError("density: give either density (with ionization) or electron_density, not both")
        rho = _to_array(density, u.g / u.cm**3, "density", np.float64)
        _check("density", rho, shape, 0.0, strict=False)
        from .physics.ionization import resolve_ionization
        model = resolve_ionization("full" if ionization is None else ionization,
                                   composition=composition, helium=helium)
        ne, ni = model.electron_and_ion_terms(rho, np.asarray(t, np.float64), fields or {})
        return (np.ascontiguousarray(t, dtype), np.ascontiguousarray(ne, dtype), np.ascontiguousarray(ni, dtype),
                model.describe())
    if electron_density is None:
        raise InputError("electron_density: required unless density and ionization are given")
    if ionization is not None:
        raise InputError("ionization: only used with density; electron_density was given directly")
    ne = _to_array(electron_density, u.cm**-3, "electron_density", dtype)
    _check("electron_density", ne, shape, 0.0, strict=False)
    t = np.ascontiguousarray(t, dtype)
    if ion_density is None:
        return t, ne, ne, "supplied n_e; ion term = n_e"
    ni = _to_array(ion_density, u.cm**-3, "ion_density", dtype)
    _check("ion_density", ni, shape, 0.0, strict=False)
    return t, ne, ni, "supplied n_e and ion term"


class GridGeometry:
    """The box of a grid with ``shape``, ``cell_size`` (cm) and ``origin`` (cm) attributes."""

    @property
    def extent(self):
        """``(lower, upper)`` corners of the grid in cm."""
        return self.origin, self.origin + np.asarray(self.shape) * self.cell_size

    @property
    def center(self):
        """Centre of the grid in cm."""
        lo, hi = self.extent
        return (lo + hi) / 2


class Snapshot(GridGeometry):
    """Electron density, ion term and temperature on a regular grid.

    Build one with :meth:`from_arrays` (or a reader); the constructor expects
    validated float arrays in cgs units.

    Attributes
    ----------
    shape : tuple of int
        Grid shape ``(nx, ny, nz)``.
    cell_size : ndarray (3,)
        Cell size per axis in cm.
    origin : ndarray (3,)
        Lower corner of cell (0, 0, 0) in cm.
    provenance : dict
        Where the data came from and how the ionization was derived.
    """

    #: True when the fields are arrays in memory; False for a file-backed snapshot
    #: (:func:`rtrace.open_hdf5`), whose fields are read brick by brick.
    in_memory = True
    _product = None
    _blocks = None

    def __init__(self, temperature, electron_density, ion_term, cell_size, origin, provenance):
        self._t = temperature
        self._ne = electron_density
        self._ni = ion_term
        self.shape = temperature.shape
        self.cell_size = np.asarray(cell_size, float)
        self.origin = np.asarray(origin, float)
        self.provenance = dict(provenance)
        self._checksum = None
        self._product = None
        self._blocks = None

    @classmethod
    def from_arrays(cls, temperature, cell_size, electron_density=None, ion_density=None, *,
                    density=None, ionization=None, composition=None, helium=None, origin=None,
                    fields=None, dtype=np.float32, source="arrays"):
        """Build a Snapshot from in-memory arrays.

        Give either ``electron_density`` (and optionally ``ion_density``) or the
        mass ``density`` with an ``ionization`` model.

        Parameters
        ----------
        temperature : `~astropy.units.Quantity` (nx, ny, nz)
            Electron temperature (K); must be finite and > 0.
        cell_size : `~astropy.units.Quantity`
            Cell size: a length, or a 3-vector of lengths (per axis).
        electron_density : `~astropy.units.Quantity` (nx, ny, nz), optional
            Electron number density (cm-3), finite and >= 0.
        ion_density : `~astropy.units.Quantity` (nx, ny, nz), optional
            Ion term ``sum_i Z_i^2 n_i`` (cm-3). Defaults to ``electron_density``
            (pure hydrogen); the same array is shared, not copied.
        density : `~astropy.units.Quantity` (nx, ny, nz), optional
            Mass density (g cm-3), used with ``ionization``.
        ionization : str, IonizationModel or array, optional
            ``"full"`` (default when ``density`` is given), ``"threshold"``,
            ``"saha"``, a model from :mod:`rtrace.physics.ionization`, or a
            hydrogen ionized-fraction field.
        composition : `~rtrace.physics.ionization.Composition`, optional
            Hydrogen and helium mass fractions (default X = 0.70, Y = 0.28).
        helium : str, optional
            Helium ionization state for the models that take one.
        origin : `~astropy.units.Quantity` (3,), optional
            Lower corner of the grid; default (0, 0, 0).
        fields : dict, optional
            Extra fields passed to the ionization model.
        dtype : numpy dtype, optional
            Storage type, float32 (default) or float64.
        source : str, optional
            Provenance label.
        """
        dtype = np.dtype(dtype)
        if dtype not in (np.float32, np.float64):
            raise InputError(f"dtype: must be float32 or float64, got {dtype}")
        t = _to_array(temperature, u.K, "temperature", np.float64 if density is not None else dtype,
                      u.temperature())
        if t.ndim != 3:
            raise InputError(f"temperature: expected a 3D array, got {t.ndim} dimension(s)")
        shape = t.shape
        _check("temperature", t, shape, 0.0, strict=True)
        cell = _vector3(cell_size, "cell_size", u.cm)
        if not np.all(np.isfinite(cell) & (cell > 0)):
            raise InputError(f"cell_size: must be finite and positive, got {cell} cm")
        org = np.zeros(3) if origin is None else _vector3(origin, "origin", u.cm)
        t, ne, ni, how = derive_terms(t, electron_density, ion_density, density, ionization, composition,
                                      helium, fields, dtype)
        provenance = {"source": str(source), "ionization": how}
        check_temperature_range(t, "temperature")
        return cls(t, ne, ni, cell, org, provenance)

    @classmethod
    def from_yt(cls, ds, *, temperature, electron_density=None, ion_density=None, density=None, ionization=None,
                composition=None, helium=None, level=None, dtype=np.float32):
        """Build a snapshot from a yt dataset, any simulation code yt reads.

        Parameters
        ----------
        ds : yt Dataset or path
            A loaded dataset, or a path handed to ``yt.load``.
        temperature, electron_density, ion_density, density : str or (str, str)
            yt field names (``"temperature"`` or ``("gas", "temperature")``);
            yt's units are carried through. Give ``electron_density`` (and
            optionally the ion term ``ion_density``) or ``density``.
        ionization : str, field name or model, optional
            With ``density``: a model name (``"full"``, ``"threshold"``,
            ``"saha"``), an :class:`~rtrace.physics.ionization.IonizationModel`,
            or the name of a hydrogen ionized-fraction field.
        composition, helium : optional
            As for :meth:`from_arrays`.
        level : int, optional
            Sample the data on yt's covering grid at this refinement level
            (a uniform snapshot). By default a block-structured AMR dataset
            keeps every grid at its native resolution
            (:class:`~rtrace.amr.AMRSnapshot`) and a single-level one becomes
            a uniform snapshot; octree and particle datasets need ``level``.
        dtype : numpy dtype, optional
            Storage type, float32 (default) or float64.

        Returns
        -------
        `Snapshot` or `~rtrace.amr.AMRSnapshot`

        Raises
        ------
        InputError
            A field the dataset does not have (the message lists those it
            has), invalid values (field, problem and cell count), AMR grids
            not aligned with their parents' cells.
        """
        from .io.ytdata import from_yt
        return from_yt(ds, temperature=temperature, electron_density=electron_density, ion_density=ion_density,
                       density=density, ionization=ionization, composition=composition, helium=helium,
                       level=level, dtype=dtype)

    # -- fields as Quantities (views, no copies) --------------------------------------------
    @property
    def temperature(self):
        """Electron temperature, Quantity (nx, ny, nz) in K."""
        return u.Quantity(self._t, u.K, copy=False)

    @property
    def electron_density(self):
        """Electron density, Quantity (nx, ny, nz) in cm-3."""
        return u.Quantity(self._ne, u.cm**-3, copy=False)

    @property
    def ion_density(self):
        """Ion term ``sum_i Z_i^2 n_i``, Quantity (nx, ny, nz) in cm-3."""
        return u.Quantity(self._ni, u.cm**-3, copy=False)

    def field_source(self):
        """The fields as a brick source for the tracer (see :mod:`rtrace.transfer.bricks`).

        Returns
        -------
        `~rtrace.transfer.bricks.ArraySource`
            ``read(lo, hi)`` gives ``(n_e, ion term, T_e)`` of cells
            ``lo <= (i, j, k) < hi`` (cgs, the storage dtype), copied only
            where the box is not contiguous in memory.
        """
        from .transfer.bricks import ArraySource
        return ArraySource(self._ne, self._ni, self._t)

    def emission_product(self):
        """``n_e x ion term`` per cell (storage dtype), formed on first use and kept.

        Oblique views read it instead of both fields (their layer-by-layer
        sweep reads memory with a stride, so each array read costs): one more
        cube of memory for as long as the snapshot lives, or until :meth:`release`.
        """
        if self._product is None:
            from .transfer.tracer import emission_product
            self._product = emission_product(self._ne, self._ni)
        return self._product

    def emitting_blocks(self):
        """Which blocks of 8^3 cells hold emitting gas (:func:`rtrace.transfer.kernels.emitting_blocks`), kept.

        Oblique views skip the blocks with none (1/512 of a cube of uint8).
        """
        if self._blocks is None:
            from .transfer.kernels import emitting_blocks
            self._blocks = emitting_blocks(self.emission_product())
        return self._blocks

    def release(self):
        """Free what the snapshot computed and kept for speed (the emission product and its block map)."""
        self._product = None
        self._blocks = None

    def checksum(self):
        """SHA-256 of the stored fields and geometry (for provenance headers); computed once."""
        if self._checksum is None:
            h = hashlib.sha256()
            for arr in (self._t, self._ne, self._ni, self.cell_size, self.origin):
                h.update(memoryview(np.ascontiguousarray(arr)).cast("B"))
            self._checksum = h.hexdigest()
        return self._checksum

    def describe(self):
        """Multi-line summary: shape, geometry, field ranges."""
        lines = [f"Snapshot {self.shape[0]}x{self.shape[1]}x{self.shape[2]} from {self.provenance['source']}",
                 f"  cell size  {', '.join(f'{c / PC:.4g}' for c in self.cell_size)} pc",
                 f"  ionization {self.provenance.get('ionization', '?')}"]
        for name, arr, unit in (("T_e", self._t, "K"), ("n_e", self._ne, "cm-3"), ("ion term", self._ni, "cm-3")):
            lines.append(f"  {name:<10} {float(arr.min()):.4g} .. {float(arr.max()):.4g} {unit}")
        return "\n".join(lines)

    def __repr__(self):
        return f"<Snapshot shape={self.shape} source={self.provenance['source']!r}>"
