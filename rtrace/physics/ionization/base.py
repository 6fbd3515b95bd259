"""The interface every ionization model implements: mass density and temperature to species densities."""

import abc

import numpy as np

from ...errors import InputError, warn_user
from .composition import SPECIES, Composition, broadcast_pair, ion_term

__all__ = ["IonizationModel"]


class IonizationModel(abc.ABC):
    """Interface: map ``(rho, T, fields)`` to the number densities of every species.

    Subclasses implement :meth:`_species` on validated float64 arrays (cgs)
    and :meth:`describe`. Everything else (the electron density, the ion
    term, the particle count that sets the pressure) follows from the
    species densities.

    Parameters
    ----------
    composition : Composition, optional
        H/He mass fractions; default ``Composition()`` (X=0.70, Y=0.28).
    """

    #: True when a cell's state depends on that cell's density, temperature and
    #: fields alone; False for models that need the whole grid (photoionization by
    #: sources), which the snapshot builders solve before evaluating cells.
    local = True

    def __init__(self, composition: Composition | None = None):
        if composition is None:
            composition = Composition()
        if not isinstance(composition, Composition):
            raise InputError(f"composition: expected a Composition, got {type(composition).__name__}")
        self.composition = composition
        self._range_counts = {}
        self._warned = set()

    # -- what the model reads besides rho and T ---------------------------------------------
    def field_names(self):
        """Names of snapshot fields the model reads (datasets or yt fields a reader must fetch)."""
        return ()

    def cell_arrays(self):
        """Per-cell arrays the model holds itself (internal keys of ``fields``); broadcast to the grid."""
        return {}

    def with_fields(self, fields, shape):
        """``fields`` plus the model's own per-cell arrays (grid-shaped, or a scalar spread over ``shape``)."""
        merged = dict(fields or {})
        for key, arr in self.cell_arrays().items():
            # one number for the whole grid, or one value per cell: an (n,) or (n, n) array
            # would broadcast along the missing axes without a word
            if np.ndim(arr) and tuple(np.shape(arr)) != tuple(shape):
                raise InputError(
                    f"{key.strip('<>')}: shape {np.shape(arr)} is not the grid shape {tuple(shape)} "
                    "(give one value per cell, or a single number for the whole grid)"
                )
            merged[key] = np.broadcast_to(arr, shape)
        return merged

    def validate_fields(self, fields):
        """Check the model's per-cell fields over the whole grid (before any evaluation); InputError if bad."""
        # a hook, not abstract: models that read no per-cell fields of their own have nothing to check
        return None

    # -- public evaluation ----------------------------------------------------------------------
    def species_densities(self, rho, T, fields=None):
        """Number densities of every species in every cell.

        Parameters
        ----------
        rho : numpy.ndarray or astropy.units.Quantity
            Mass density in g cm^-3 (finite, >= 0).
        T : numpy.ndarray or astropy.units.Quantity
            Temperature in K (finite, >= 0), broadcast against ``rho``.
        fields : dict of str to numpy.ndarray, optional
            Extra snapshot fields the model reads (see :meth:`field_names`).

        Returns
        -------
        dict of str to numpy.ndarray
            Keys ``"n_e", "n_HI", "n_HII", "n_HeI", "n_HeII", "n_HeIII"``,
            float64 arrays in cm^-3 of the broadcast shape.

        Raises
        ------
        InputError
            Negative or non-finite cells (named and counted), shapes that
            do not broadcast, a missing or invalid field.
        """
        rho_a, T_a = broadcast_pair(rho, T)
        sp = self._species(rho_a, T_a, self.with_fields(fields, rho_a.shape))
        self.warn_range()
        # fresh, writable float64 arrays even when inputs were broadcast views
        return {k: np.array(np.broadcast_to(sp[k], rho_a.shape), dtype=np.float64) for k in SPECIES}

    def electron_and_ion_terms(self, rho, T, fields=None):
        """Electron density and charge-weighted ion density ``sum_i Z_i^2 n_i`` in every cell.

        Same parameters as :meth:`species_densities`; returns ``(n_e, ion_term)``,
        float64 arrays in cm^-3 (H II and He II count with Z = 1, He III with Z = 2).
        """
        sp = self.species_densities(rho, T, fields)
        return sp["n_e"], ion_term(sp)

    def temperature_at_pressure(self, rho, pressure, fields):
        """Gas temperature [K] at which this model's particle count gives ``pressure`` (see ``cells``)."""
        from .cells import temperature_from_pressure

        return temperature_from_pressure(self, rho, pressure, fields)

    def electron_temperature(self, T, species, fields):
        """Electron temperature [K] of each cell: the gas temperature, unless the model sets it."""
        return T

    @abc.abstractmethod
    def _species(self, rho, T, fields):
        """Species densities on validated float64 arrays (cgs); ``fields`` holds the model's arrays."""

    @abc.abstractmethod
    def describe(self) -> str:
        """One-line description for provenance headers."""

    # -- range warnings, issued once per model ------------------------------------------------
    def _count_range(self, key, affected, total):
        """Accumulate cells outside the model's validity (``key`` names the problem) over evaluations."""
        counts = self._range_counts.setdefault(key, [0, 0])
        counts[0] += int(affected)
        counts[1] += int(total)

    def _range_message(self, key, affected, total):
        """The warning text for ``affected`` of ``total`` cells (subclasses that count override it)."""
        return f"{key}: {affected} of {total} cells outside the model's validity"

    def warn_range(self):
        """Issue the accumulated PhysicsRangeWarning(s), each at most once per model, and reset the counts."""
        for key, (affected, total) in self._range_counts.items():
            if affected and key not in self._warned:
                self._warned.add(key)
                warn_user(self._range_message(key, affected, total))
        self._range_counts = {}

    def __repr__(self) -> str:
        return f"<{type(self).__name__} {self.describe()}>"

    def __getstate__(self):
        state = dict(self.__dict__)
        state["_range_counts"] = {}
        return state
