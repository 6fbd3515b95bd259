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
from .gas import derive_fields
from .physics.constants import PC
from .physics.freefree import check_temperature_range
from .quantities import parse_vector3, storage_dtype

__all__ = ["Snapshot", "ArraySource", "register_reader"]

# Readers of other codes' outputs, by name, registered by their modules (rtrace.io.ytdata registers "yt"),
# so that the data model does not import its readers.
_READERS = {}


def register_reader(name, reader):
    """Make ``reader`` the function behind ``Snapshot.from_<name>`` (called by the reader's module on import)."""
    _READERS[name] = reader


#: Provenance entries that ``describe`` shows, with their labels.
_PROVENANCE_LINES = (
    ("ionization_state", "state"),
    ("temperature", "T from"),
    ("ionizing_sources", "sources"),
    ("photon_budget", "photons"),
)


def field_digest(arr):
    """A new SHA-256 object fed with the bytes of ``arr`` in C order (more can be added piece by piece)."""
    h = hashlib.sha256()
    h.update(memoryview(np.ascontiguousarray(arr)).cast("B"))
    return h


def combined_checksum(digests, cell_size, origin):
    """SHA-256 (hex) of the field digests, then the cell size and origin as float64 bytes."""
    h = hashlib.sha256()
    for d in digests:
        h.update(d.digest())
    for arr in (cell_size, origin):
        h.update(memoryview(np.ascontiguousarray(arr, np.float64)).cast("B"))
    return h.hexdigest()


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

    def __init__(self, temperature, electron_density, ion_term, cell_size, origin, provenance):
        self._t = temperature
        self._ne = electron_density
        self._ni = ion_term
        self.shape = temperature.shape
        self.cell_size = np.asarray(cell_size, float)
        self.origin = np.asarray(origin, float)
        self.provenance = dict(provenance)
        self._checksum = None
        #: Arrays other layers derive from the fields once and keep with the snapshot (the tracer's
        #: emission product, block map and ratio: :mod:`rtrace.transfer.cell_cache`); :meth:`release` empties it.
        self.kept = {}

    @classmethod
    def from_arrays(
        cls,
        temperature=None,
        cell_size=None,
        electron_density=None,
        ion_density=None,
        *,
        density=None,
        pressure=None,
        internal_energy=None,
        gamma=None,
        ionization=None,
        composition=None,
        helium=None,
        origin=None,
        fields=None,
        dtype=np.float32,
        source="arrays",
    ):
        """Build a Snapshot from in-memory arrays.

        Give either ``electron_density`` (and optionally ``ion_density``)
        with the ``temperature``, or the mass ``density`` with an
        ``ionization`` model and one thermal input: ``temperature``,
        ``pressure`` or ``internal_energy``.

        Every physical field must be an `~astropy.units.Quantity`: a plain
        array is refused (InputError naming the field), because values in a
        simulation's code units would otherwise be taken as cgs without a
        word. Ionized fractions and model ``fields`` are dimensionless.

        Parameters
        ----------
        temperature : `~astropy.units.Quantity` (nx, ny, nz), optional
            Gas (electron) temperature (K); finite and > 0.
        cell_size : `~astropy.units.Quantity`
            Cell size: a length, or a 3-vector of lengths (per axis).
        electron_density : `~astropy.units.Quantity` (nx, ny, nz), optional
            Electron number density (cm-3), finite and >= 0.
        ion_density : `~astropy.units.Quantity` (nx, ny, nz), optional
            Ion term ``sum_i Z_i^2 n_i`` (cm-3). Defaults to ``electron_density``
            (pure hydrogen); the same array is shared, not copied.
        density : `~astropy.units.Quantity` (nx, ny, nz), optional
            Mass density (g cm-3), used with ``ionization``.
        pressure : `~astropy.units.Quantity` (nx, ny, nz), optional
            Gas pressure (dyn cm-2, > 0), instead of ``temperature``: ``T``
            then solves ``P = (n_H + n_He + n_e) k T`` in every cell with the
            ionization model's ``n_e``, which depends on ``T`` (the mean
            molecular weight follows the ionization).
        internal_energy : `~astropy.units.Quantity` (nx, ny, nz), optional
            Specific internal energy (erg g-1, > 0), instead of
            ``temperature``: ``P = (gamma - 1) rho e``, then as for ``pressure``.
        gamma : float, optional
            Adiabatic index for ``internal_energy`` (default 5/3, a monatomic
            ideal gas); accepted, and not needed, with ``pressure``.
        ionization : str, IonizationModel or array, optional
            ``"full"`` (default when ``density`` is given), ``"threshold"``,
            ``"saha"`` (dense gas only), ``"collisional"`` (hot or shocked
            gas), a model from :mod:`rtrace.physics.ionization` (e.g.
            ``IonizingSources`` for stars in the grid, ``SuppliedFraction``),
            or a hydrogen ionized-fraction array.
        composition : `~rtrace.physics.ionization.Composition`, optional
            Hydrogen and helium mass fractions (default X = 0.70, Y = 0.28).
        helium : str, optional
            Helium ionization state for the models that take one.
        origin : `~astropy.units.Quantity` (3,), optional
            Lower corner of the grid; default (0, 0, 0).
        fields : dict, optional
            Named per-cell fields the ionization model reads (e.g. a
            ``SuppliedFraction("x_HII")``).
        dtype : numpy dtype, optional
            Storage type, float32 (default) or float64.
        source : str, optional
            Provenance label.

        Raises
        ------
        InputError
            A missing, surplus or invalid field (the message names it, the
            problem and the number of bad cells), sources outside the grid;
            a grid with no cells; complex or object arrays; ionized
            fractions or ``fields`` whose shape is not the grid's (a single
            number is accepted); all found before the ionization is
            computed. With float32 storage, values or a product
            ``n_e x ion term`` beyond the float32 range (the message asks
            for ``dtype=numpy.float64``).

        Warns
        -----
        PhysicsRangeWarning
            Temperatures above 1e9 K, or outside the tracer's Gaunt factor
            table (1 K to 1e10 K); a model used outside its validity
            (Saha at interstellar densities, photoionized gas left cold).
        """
        dtype = storage_dtype(dtype)
        if cell_size is None:
            raise InputError("cell_size: required (a length, or three lengths)")
        cell = parse_vector3(cell_size, "cell_size", u.cm)
        if not np.all(np.isfinite(cell) & (cell > 0)):
            raise InputError(f"cell_size: must be finite and positive, got {cell} cm")
        org = np.zeros(3) if origin is None else parse_vector3(origin, "origin", u.cm)
        t, ne, ni, derived = derive_fields(
            cell,
            org,
            temperature=temperature,
            electron_density=electron_density,
            ion_density=ion_density,
            density=density,
            pressure=pressure,
            internal_energy=internal_energy,
            gamma=gamma,
            ionization=ionization,
            composition=composition,
            helium=helium,
            fields=fields,
            dtype=dtype,
        )
        provenance = {"source": str(source), **derived}
        check_temperature_range(t, "temperature")
        return cls(t, ne, ni, cell, org, provenance)

    @classmethod
    def from_yt(
        cls,
        ds,
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
        level=None,
        dtype=np.float32,
    ):
        """Build a snapshot from a yt dataset, any simulation code yt reads.

        Parameters
        ----------
        ds : yt Dataset or path
            A loaded dataset, or a path handed to ``yt.load``.
        temperature, pressure, internal_energy : str or (str, str)
            yt field name of the one thermal input (``"temperature"`` or
            ``("gas", "temperature")``; ``("gas", "pressure")``;
            ``("gas", "specific_thermal_energy")``); yt's units are carried
            through. Pressure and internal energy need ``density``.
        electron_density, ion_density, density : str or (str, str)
            yt field names. Give ``electron_density`` (and optionally the
            ion term ``ion_density``) or ``density``.
        gamma : float, optional
            Adiabatic index for ``internal_energy`` (default 5/3).
        ionization : str, field name or model, optional
            With ``density``: a model name (``"full"``, ``"threshold"``,
            ``"saha"``, ``"collisional"``), an
            :class:`~rtrace.physics.ionization.IonizationModel` (a
            ``SuppliedFraction`` may name yt fields for hydrogen, He II and
            He III; ``IonizingSources`` needs a uniform grid), or the name
            of a hydrogen ionized-fraction field.
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
            not aligned with their parents' cells, sources with an AMR
            hierarchy (give ``level``).
        """
        return _READERS["yt"](
            ds,
            temperature=temperature,
            electron_density=electron_density,
            ion_density=ion_density,
            density=density,
            pressure=pressure,
            internal_energy=internal_energy,
            gamma=gamma,
            ionization=ionization,
            composition=composition,
            helium=helium,
            level=level,
            dtype=dtype,
        )

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
        `ArraySource`
            ``read(lo, hi)`` gives ``(n_e, ion term, T_e)`` of cells
            ``lo <= (i, j, k) < hi`` (cgs, the storage dtype), copied only
            where the box is not contiguous in memory.
        """
        return ArraySource(self._ne, self._ni, self._t)

    def release(self):
        """Free what was derived from the fields and kept for speed (:attr:`kept`: emission product, block map)."""
        self.kept.clear()

    def checksum(self):
        """SHA-256 of the stored fields and geometry (for provenance headers); computed once.

        The digest of the three fields' digests (temperature, electron
        density, ion term, each over its bytes in C order) and of the cell
        size and origin, so a file-backed snapshot can hash all three in one
        streaming pass.
        """
        if self._checksum is None:
            self._checksum = combined_checksum(
                [field_digest(a) for a in (self._t, self._ne, self._ni)], self.cell_size, self.origin
            )
        return self._checksum

    def describe(self):
        """Multi-line summary: shape, geometry, ionization, field ranges."""
        lines = [
            f"Snapshot {self.shape[0]}x{self.shape[1]}x{self.shape[2]} from {self.provenance['source']}"
            + self._describe_note,
            f"  cell size  {', '.join(f'{c / PC:.4g}' for c in self.cell_size)} pc",
            f"  ionization {self.provenance.get('ionization', '?')}",
        ]
        lines += [f"  {label:<10} {self.provenance[key]}" for key, label in _PROVENANCE_LINES if key in self.provenance]
        ranges = zip(("T_e", "n_e", "ion term"), self._field_ranges(), ("K", "cm-3", "cm-3"), strict=True)
        for label, (lo, hi), unit in ranges:
            lines.append(f"  {label:<10} {lo:.4g} .. {hi:.4g} {unit}")
        return "\n".join(lines)

    _describe_note = ""

    def _field_ranges(self):
        """``(min, max)`` of the temperature, electron density and ion term."""
        return [(float(a.min()), float(a.max())) for a in (self._t, self._ne, self._ni)]

    def __repr__(self):
        return f"<Snapshot shape={self.shape} source={self.provenance['source']!r}>"


class ArraySource:
    """Bricks of in-memory arrays (copies only where a brick is not contiguous).

    Parameters
    ----------
    ne, ni, t : ndarray (nx, ny, nz)
        Electron density, ion term (cm-3) and temperature (K); ``ni`` may be ``ne``.
    """

    #: Shipping this source to another process would ship the whole arrays.
    portable = False
    scratch_bytes = 0

    def __init__(self, ne, ni, t):
        self.ne, self.ni, self.t = ne, ni, t
        self.shape = tuple(t.shape)
        self.dtype = t.dtype

    @property
    def bytes_per_cell(self):
        """Bytes one brick cell costs when read (the shared ion term is copied once)."""
        return self.dtype.itemsize * (2 if self.ni is self.ne else 3)

    def read(self, lo, hi):
        """``(n_e, ion term, T_e)`` of cells ``lo <= index < hi``, C-contiguous."""
        sl = tuple(slice(int(a), int(b)) for a, b in zip(lo, hi, strict=True))
        ne = np.ascontiguousarray(self.ne[sl])
        ni = ne if self.ni is self.ne else np.ascontiguousarray(self.ni[sl])
        return ne, ni, np.ascontiguousarray(self.t[sl])
