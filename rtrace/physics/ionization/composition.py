"""Composition of the gas, atomic data and the input checks every ionization model shares.

Only hydrogen and helium are followed. The metal mass fraction
``1 - X - Y`` is carried as mass only: metals contribute neither electrons,
ions nor particles. For solar-like abundances metals would add of order
0.1 % to ``n_e`` in fully ionized gas and to the particle count (common
practice to neglect them).
"""

import difflib
from dataclasses import dataclass

import astropy.constants as const
import astropy.units as u
import numpy as np

from ...errors import InputError
from ...quantities import check_cells

__all__ = [
    "Composition",
    "SPECIES",
    "DEFAULT_HYDROGEN_MASS_FRACTION",
    "DEFAULT_HELIUM_MASS_FRACTION",
    "M_H",
    "M_HE",
    "K_B",
    "ERG_PER_EV",
    "CHI_H",
    "CHI_HE1",
    "CHI_HE2",
    "as_float_array",
    "check_finite_nonnegative",
    "check_choice",
    "broadcast_pair",
    "ion_term",
    "particle_density",
]

#: Keys of the species dictionaries every model returns (number densities, cm^-3).
SPECIES = ("n_e", "n_HI", "n_HII", "n_HeI", "n_HeII", "n_HeIII")

#: Boltzmann constant [erg K^-1].
K_B = const.k_B.cgs.value
#: Mass of a hydrogen atom [g]: proton plus electron. The 13.6 eV binding
#: energy (1.5e-8 of the mass) is neglected, which is far below any other
#: uncertainty here. Deuterium (~2.5e-5 by number) is not separated out.
M_H = (const.m_p + const.m_e).cgs.value
#: Mean mass of a helium atom [g]: the standard atomic weight of helium,
#: 4.002602 (IUPAC, from memory), in atomic mass units.
M_HE = 4.002602 * const.u.cgs.value
ERG_PER_EV = u.eV.to(u.erg)

#: Ionization energies [erg] of H I, He I and He II (NIST values,
#: from memory): 13.598434 eV, 24.587389 eV, 54.417765 eV.
CHI_H = 13.598434 * ERG_PER_EV
CHI_HE1 = 24.587389 * ERG_PER_EV
CHI_HE2 = 54.417765 * ERG_PER_EV

#: Default hydrogen and helium mass fractions, X = 0.70 and Y = 0.28
#: (roughly solar/ISM, common practice; recent solar values are close,
#: e.g. X ~ 0.74, Y ~ 0.25, from memory).
DEFAULT_HYDROGEN_MASS_FRACTION = 0.70
DEFAULT_HELIUM_MASS_FRACTION = 0.28


def as_float_array(value, unit, name, equivalencies=None):
    """A Quantity or array-like as a float64 ndarray in ``unit``; plain numbers are taken to be in ``unit``.

    Raises
    ------
    InputError
        The unit does not convert, or the value is not numeric.
    """
    if isinstance(value, u.Quantity):
        try:
            value = value.to_value(unit, equivalencies=equivalencies or [])
        except u.UnitConversionError:
            raise InputError(f"{name}: cannot convert {value.unit} to {unit}") from None
    if np.iscomplexobj(value):
        raise InputError(
            f"{name}: complex values given; a physical quantity is real, and casting would "
            "silently drop the imaginary parts; pass the real part"
        )
    try:
        return np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError):
        raise InputError(f"{name}: expected a numeric array, got {type(value).__name__}") from None


def check_finite_nonnegative(arr, name, unit_text):
    """Raise InputError naming ``name`` if any cell is negative or non-finite (with the count)."""
    check_cells(arr, name, 0.0, rule=f"{name} >= 0 {unit_text}")


def check_choice(value, allowed, name, model):
    """``value`` if it is one of ``allowed`` (strings), else an InputError listing them."""
    if not isinstance(value, str) or value not in allowed:
        close = difflib.get_close_matches(value, allowed, n=1) if isinstance(value, str) else []
        hint = f" (did you mean {close[0]!r}?)" if close else ""
        raise InputError(f"{name}: {value!r} is not valid for {model}; choose one of {', '.join(allowed)}{hint}")
    return value


def broadcast_pair(rho, T):
    """Validated float64 ``(rho, T)`` in g cm^-3 and K, broadcast against each other."""
    rho_a = as_float_array(rho, u.g / u.cm**3, "rho")
    T_a = as_float_array(T, u.K, "T", equivalencies=u.temperature())
    try:
        rho_a, T_a = np.broadcast_arrays(rho_a, T_a)
    except ValueError:
        raise InputError(f"rho, T: shapes {rho_a.shape} and {T_a.shape} do not broadcast") from None
    check_finite_nonnegative(rho_a, "rho", "g cm^-3")
    check_finite_nonnegative(T_a, "T", "K")
    return rho_a, T_a


def ion_term(species):
    """The free-free ion term ``sum_i Z_i^2 n_i`` (cm^-3): H II and He II have Z = 1, He III Z = 2."""
    return species["n_HII"] + species["n_HeII"] + 4.0 * species["n_HeIII"]


def particle_density(species):
    """All free particles, ``n_H + n_He + n_e`` (cm^-3), which set the gas pressure ``P = n k T``."""
    return (
        species["n_HI"] + species["n_HII"] + species["n_HeI"] + species["n_HeII"] + species["n_HeIII"] + species["n_e"]
    )


@dataclass(frozen=True)
class Composition:
    """Hydrogen and helium mass fractions of the gas.

    Parameters
    ----------
    hydrogen : float
        Hydrogen mass fraction X (dimensionless), ``0 <= X``. Default 0.70.
    helium : float
        Helium mass fraction Y (dimensionless), ``0 <= Y``, ``X + Y <= 1``.
        Default 0.28.

    Notes
    -----
    The remainder ``1 - X - Y`` (metals) counts as mass only: it supplies
    no electrons, no ions and no particles.

    Number densities use ``m_H = m_p + m_e`` (astropy ``const.m_p`` plus
    ``const.m_e``; the hydrogen atom mass without its 13.6 eV binding
    energy) and ``m_He = 4.002602 u`` (standard atomic weight of helium,
    astropy ``const.u``).
    """

    hydrogen: float = DEFAULT_HYDROGEN_MASS_FRACTION
    helium: float = DEFAULT_HELIUM_MASS_FRACTION

    def __post_init__(self):
        for name in ("hydrogen", "helium"):
            raw = getattr(self, name)
            if isinstance(raw, u.Quantity):
                try:
                    raw = raw.to_value(u.dimensionless_unscaled)
                except u.UnitConversionError:
                    raise InputError(f"{name}: mass fraction must be dimensionless") from None
            try:
                val = float(raw)
            except (TypeError, ValueError):
                raise InputError(f"{name}: mass fraction must be a number, got {raw!r}") from None
            if not np.isfinite(val) or val < 0.0 or val > 1.0:
                raise InputError(f"{name}: mass fraction must lie in [0, 1], got {val!r}")
            # frozen dataclass: store the cleaned float through object.__setattr__
            object.__setattr__(self, name, val)
        # Allow a rounding-level excess so that e.g. 0.7 + 0.3 is accepted.
        if self.hydrogen + self.helium > 1.0 + 1e-12:
            raise InputError(f"hydrogen, helium: X + Y = {self.hydrogen + self.helium!r} exceeds 1")

    @property
    def metals(self) -> float:
        """Metal mass fraction ``1 - X - Y`` (dimensionless, >= 0)."""
        return max(0.0, 1.0 - self.hydrogen - self.helium)

    def hydrogen_number_density(self, rho_cgs) -> np.ndarray:
        """Number density of hydrogen nuclei, ``n_H = X rho / m_H`` (cm^-3, float64), rho in g cm^-3."""
        return self.hydrogen * as_float_array(rho_cgs, u.g / u.cm**3, "rho") / M_H

    def helium_number_density(self, rho_cgs) -> np.ndarray:
        """Number density of helium nuclei, ``n_He = Y rho / (4.002602 m_u)`` (cm^-3, float64), rho in g cm^-3."""
        return self.helium * as_float_array(rho_cgs, u.g / u.cm**3, "rho") / M_HE

    def describe(self) -> str:
        """Short text ``"X=..., Y=..."`` for provenance strings."""
        return f"X={self.hydrogen:g}, Y={self.helium:g}"
