"""Quick-look models: everything ionized, or ionized above a temperature threshold."""

import astropy.units as u
import numpy as np

from ...errors import InputError
from .base import IonizationModel
from .composition import Composition, as_float_array, check_choice

__all__ = ["FullyIonized", "TemperatureThreshold", "DEFAULT_THRESHOLD_TEMPERATURE", "helium_species"]

#: Default temperature above which :class:`TemperatureThreshold` treats gas
#: as ionized [K]. Photoionized gas settles near 1e4 K while cold and
#: molecular gas is far cooler; 8000 K sits just below typical H II region
#: temperatures (common practice). Warm neutral gas near 8000 K is the
#: known weakness of any single threshold.
DEFAULT_THRESHOLD_TEMPERATURE = 8000.0

_HELIUM_FULL = ("single", "double")


def helium_species(n_he, fraction, helium):
    """``(n_HeI, n_HeII, n_HeIII)`` when a ``fraction`` of the helium is ionized to the ``helium`` stage.

    ``helium`` is ``"none"`` (all neutral), ``"single"`` (He II, Z = 1, one
    electron each) or ``"double"`` (He III, Z = 2, two electrons each).
    """
    zero = np.zeros_like(n_he)
    if helium == "none":
        return n_he, zero, zero
    ionized = fraction * n_he
    neutral = n_he - ionized
    return (neutral, ionized, zero) if helium == "single" else (neutral, zero, ionized)


def hydrogen_helium_species(composition, rho, x_h, x_he, helium):
    """Species dictionary for hydrogen ionized fraction ``x_h`` and helium ionized fraction ``x_he``."""
    n_h = composition.hydrogen_number_density(rho)
    n_he = composition.helium_number_density(rho)
    n_hii = x_h * n_h
    he1, he2, he3 = helium_species(n_he, x_he, helium)
    return {
        "n_e": n_hii + he2 + 2.0 * he3,
        "n_HI": n_h - n_hii,
        "n_HII": n_hii,
        "n_HeI": he1,
        "n_HeII": he2,
        "n_HeIII": he3,
    }


class FullyIonized(IonizationModel):
    """Hydrogen fully ionized; helium fully singly or doubly ionized.

    Parameters
    ----------
    composition : Composition, optional
        H/He mass fractions; default X=0.70, Y=0.28.
    helium : {"single", "double"}
        ``"single"``: all He is He II (Z=1): ``n_He`` electrons, ``n_He`` in
        the ion term. ``"double"``: all He is He III (Z=2): ``2 n_He``
        electrons, ``4 n_He`` in the ion term. Default ``"single"``, since
        in H II regions around O/B stars few photons exceed the 54.4 eV
        He II edge (common practice). Hot gas (above ~1e5 K) has doubly
        ionized helium: use ``"double"`` there, or ``"collisional"``.

    Notes
    -----
    A quick look, not a physical model: every cell is ionized whatever its
    temperature or density.
    """

    def __init__(self, composition: Composition | None = None, helium: str = "single"):
        super().__init__(composition)
        self.helium = check_choice(helium, _HELIUM_FULL, "helium", type(self).__name__)

    def _species(self, rho, T, fields):
        return hydrogen_helium_species(self.composition, rho, 1.0, 1.0, self.helium)

    def describe(self) -> str:
        """One-line description for provenance headers."""
        return f"full({self.composition.describe()}, He={self.helium})"


class TemperatureThreshold(FullyIonized):
    """Fully ionized where ``T >= threshold``, completely neutral elsewhere.

    Parameters
    ----------
    threshold : float or astropy.units.Quantity
        Temperature in K (finite, > 0). Default 8000 K
        (:data:`DEFAULT_THRESHOLD_TEMPERATURE`).
    composition : Composition, optional
        H/He mass fractions; default X=0.70, Y=0.28.
    helium : {"single", "double"}
        Helium state in the ionized cells, as for :class:`FullyIonized`.
    """

    def __init__(
        self, threshold=DEFAULT_THRESHOLD_TEMPERATURE, composition: Composition | None = None, helium: str = "single"
    ):
        super().__init__(composition, helium)
        arr = as_float_array(threshold, u.K, "threshold", equivalencies=u.temperature())
        if arr.ndim != 0 or not np.isfinite(arr) or arr <= 0.0:
            raise InputError(f"threshold: expected one finite temperature > 0 K, got {threshold!r}")
        self.threshold = float(arr)

    def _species(self, rho, T, fields):
        hot = (T >= self.threshold).astype(np.float64)
        return hydrogen_helium_species(self.composition, rho, hot, hot, self.helium)

    def describe(self) -> str:
        """One-line description for provenance headers."""
        return f"threshold(T>={self.threshold:g} K, {self.composition.describe()}, He={self.helium})"
