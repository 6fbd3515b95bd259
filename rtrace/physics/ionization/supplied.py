"""An ionization state supplied by the snapshot: hydrogen fraction, and helium fractions or a rule.

Radiation-hydrodynamics codes write the ionized fractions they evolved;
this model takes them as they are. Each fraction is an array (or a
dimensionless Quantity) given in memory, or the name of a snapshot field
(an HDF5 dataset or yt field) that the reader fetches.
"""

import astropy.units as u
import numpy as np

from ...errors import InputError
from ...quantities import check_cells
from .base import IonizationModel
from .composition import Composition, as_float_array, check_choice
from .simple import hydrogen_helium_species

__all__ = ["SuppliedFraction"]

_HELIUM_RULES = ("follow", "single", "double", "none")
#: Sum of the He II and He III fractions tolerated above 1 (float32 storage rounding).
_SUM_TOLERANCE = 1e-6


def validated_fraction(fraction, name):
    """A fraction (array, Quantity, number) as float64 in [0, 1]; the error counts the bad cells."""
    if isinstance(fraction, u.Quantity):
        try:
            fraction = fraction.to_value(u.dimensionless_unscaled)
        except u.UnitConversionError:
            raise InputError(f"{name}: ionized fraction must be dimensionless, got unit {fraction.unit}") from None
    arr = as_float_array(fraction, u.dimensionless_unscaled, name)
    check_cells(
        arr,
        name,
        0.0,
        upper=1.0,
        rule="0 <= fraction <= 1",
        context="; an ionized fraction must be finite and within [0, 1]",
    )
    return arr


class SuppliedFraction(IonizationModel):
    """Ionized fractions supplied per cell by the snapshot.

    Parameters
    ----------
    fraction : numpy.ndarray, astropy.units.Quantity, float or str
        Hydrogen ionized fraction ``x = n_HII / n_H`` (dimensionless,
        finite, in [0, 1]); one number for the whole grid or an array of
        the grid's shape (other shapes are refused, not broadcast). A string names
        a snapshot field, validated when it is read.
    composition : Composition, optional
        H/He mass fractions; default X=0.70, Y=0.28.
    helium : {"single", "follow", "double", "none"}, optional
        How helium follows the hydrogen fraction when its own fractions are
        not supplied. ``"single"`` (default; ``"follow"`` is the same): a
        fraction ``x`` of the helium is He II, since He I and H I are
        ionized together in most H II regions (common practice);
        ``"double"``: a fraction ``x`` is He III (hot gas); ``"none"``:
        helium stays neutral. Helium is never ionized where the hydrogen
        fraction is 0.
    helium_ii, helium_iii : numpy.ndarray, Quantity, float or str, optional
        The He II and He III fractions ``n_HeII / n_He`` and
        ``n_HeIII / n_He`` themselves (arrays or field names), as
        radiation-hydrodynamics codes write them; either may be omitted
        (then 0). Their sum must not exceed 1. With these, ``helium`` must
        not be given.

    Raises
    ------
    InputError
        A fraction with non-finite cells or cells outside [0, 1], or He II
        plus He III above 1; the message names the field and counts the
        bad cells.
    """

    def __init__(
        self,
        fraction,
        composition: Composition | None = None,
        helium: str | None = None,
        helium_ii=None,
        helium_iii=None,
    ):
        super().__init__(composition)
        self._sources = {}
        self._arrays = {}
        self._take("fraction", fraction)
        supplied_helium = helium_ii is not None or helium_iii is not None
        if supplied_helium and helium is not None:
            raise InputError("helium: not used when helium_ii / helium_iii fractions are supplied")
        if supplied_helium:
            self.helium = "supplied"
            for name, value in (("helium_ii", helium_ii), ("helium_iii", helium_iii)):
                if value is not None:
                    self._take(name, value)
        else:
            rule = check_choice("single" if helium is None else helium, _HELIUM_RULES, "helium", "SuppliedFraction")
            self.helium = "single" if rule == "follow" else rule

    def _take(self, name, value):
        """Record a fraction: a field name to read later, or an in-memory array validated now."""
        if isinstance(value, str):
            self._sources[name] = value
        else:
            self._sources[name] = f"<{name}>"
            self._arrays[f"<{name}>"] = validated_fraction(value, name)

    # -- compatibility accessors ------------------------------------------------------------
    @property
    def field_name(self):
        """Name of the hydrogen-fraction field, or None when the fraction is an in-memory array."""
        key = self._sources["fraction"]
        return None if key.startswith("<") else key

    @property
    def fraction(self):
        """The in-memory hydrogen fraction array, or None when it is read from a field."""
        return self._arrays.get("<fraction>")

    def field_names(self):
        """Names of the snapshot fields the fractions are read from (none for in-memory arrays)."""
        return tuple(key for key in self._sources.values() if not key.startswith("<"))

    def cell_arrays(self):
        """The fraction arrays given in memory, under their internal keys."""
        return dict(self._arrays)

    def _read(self, fields, name, shape):
        key = self._sources[name]
        label = name if key.startswith("<") else repr(key)
        if key not in fields:
            raise InputError(f"fields: {name} field {key!r} not found; available: {sorted(fields)}")
        arr = fields[key] if key.startswith("<") else validated_fraction(fields[key], label)
        if np.ndim(arr) and tuple(np.shape(arr)) != tuple(shape):
            raise InputError(
                f"{label}: shape {np.shape(arr)} is not the grid shape {tuple(shape)} "
                "(give one value per cell, or a single number for the whole grid)"
            )
        return np.broadcast_to(arr, shape)

    def _label(self, name):
        key = self._sources[name]
        return name if key.startswith("<") else f"{name} {key!r}"

    def helium_sum_error(self, n_bad, size, largest):
        """The InputError for He II + He III fractions above 1 in ``n_bad`` of ``size`` cells."""
        return InputError(
            f"{self._label('helium_ii')} + {self._label('helium_iii')}: {n_bad} of {size} cells "
            f"have He II + He III fractions above 1 (largest {largest:.6g})"
        )

    def excess_helium(self, he2, he3):
        """``(cells with He II + He III above 1, the largest sum)`` (0 when only one is supplied)."""
        if he2 is None or he3 is None or np.size(he2) == 0:
            return 0, 0.0
        total = np.asarray(he2, np.float64) + np.asarray(he3, np.float64)
        return int(np.count_nonzero(total > 1.0 + _SUM_TOLERANCE)), float(np.max(total))

    def validate_fields(self, fields):
        """Check the supplied fractions over the whole grid; InputError if bad.

        Every named field must be present, a fraction read from a field must be
        finite and within [0, 1], and He II + He III must not exceed 1 (beyond rounding).
        """
        arrays = {}
        for name, key in self._sources.items():
            if key not in fields:
                raise InputError(f"fields: {name} field {key!r} not found; available: {sorted(fields)}")
            arrays[name] = fields[key] if key.startswith("<") else validated_fraction(fields[key], repr(key))
        n_bad, largest = self.excess_helium(arrays.get("helium_ii"), arrays.get("helium_iii"))
        if n_bad:
            size = int(np.broadcast(arrays["helium_ii"], arrays["helium_iii"]).size)
            raise self.helium_sum_error(n_bad, size, largest)

    def _species(self, rho, T, fields):
        x = self._read(fields, "fraction", rho.shape)
        if self.helium != "supplied":
            return hydrogen_helium_species(self.composition, rho, x, x, self.helium)
        zero = np.zeros(rho.shape)
        he2 = self._read(fields, "helium_ii", rho.shape) if "helium_ii" in self._sources else zero
        he3 = self._read(fields, "helium_iii", rho.shape) if "helium_iii" in self._sources else zero
        total = he2 + he3
        n_over, largest = self.excess_helium(he2, he3)
        if n_over:  # validate_fields checks the whole grid first; this guards direct calls
            raise self.helium_sum_error(n_over, total.size, largest)
        scale = np.where(total > 1.0, 1.0 / np.maximum(total, 1.0), 1.0)  # rounding-level excess only
        he2, he3 = he2 * scale, he3 * scale
        n_h = self.composition.hydrogen_number_density(rho)
        n_he = self.composition.helium_number_density(rho)
        n_hii = x * n_h
        return {
            "n_e": n_hii + (he2 + 2.0 * he3) * n_he,
            "n_HI": n_h - n_hii,
            "n_HII": n_hii,
            "n_HeI": np.maximum(1.0 - he2 - he3, 0.0) * n_he,
            "n_HeII": he2 * n_he,
            "n_HeIII": he3 * n_he,
        }

    def _source_text(self, name):
        key = self._sources[name]
        if not key.startswith("<"):
            return f"field={key!r}"
        arr = self._arrays[key]
        if arr.size:
            return f"array(shape={arr.shape}, min={arr.min():g}, max={arr.max():g})"
        return f"array(shape={arr.shape})"

    def describe(self) -> str:
        """One-line description for provenance headers: where each fraction comes from, and the composition."""
        text = f"supplied(H II {self._source_text('fraction')}"
        if self.helium == "supplied":
            for name, label in (("helium_ii", "He II"), ("helium_iii", "He III")):
                text += f", {label} {self._source_text(name)}" if name in self._sources else f", {label}=0"
        else:
            text += f", He={self.helium} with the H fraction"
        return text + f", {self.composition.describe()})"
