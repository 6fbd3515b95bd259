"""Ionization state of the gas: electron density and the free-free ion term.

Thermal free-free (bremsstrahlung) emission and absorption scale with the
product of the electron density and the charge-weighted ion density,

.. math:: n_e \\sum_i Z_i^2 n_i ,

so this module turns a hydrodynamics snapshot's mass density ``rho``
(g cm^-3) and temperature ``T`` (K) into the two number densities
``n_e`` and ``ion_term = sum_i Z_i^2 n_i`` (both cm^-3).

Only hydrogen and helium are followed. The metal mass fraction
``Z = 1 - X - Y`` is carried as mass only: metals contribute neither
electrons nor ions. For solar-like abundances metals would add of order
0.1 % to ``n_e`` in fully ionized gas (common practice to neglect them).

Four models are provided, all sharing the :class:`IonizationModel`
interface:

* :class:`FullyIonized` -- H II everywhere, He II or He III everywhere.
* :class:`TemperatureThreshold` -- fully ionized where ``T >= threshold``,
  neutral elsewhere.
* :class:`SuppliedFraction` -- the hydrogen ionized fraction comes from the
  snapshot (e.g. from a radiation-hydrodynamics code).
* :class:`SahaEquilibrium` -- local thermodynamic equilibrium (Saha
  equation) for H I/H II and He I/He II/He III, with ``n_e`` solved
  self-consistently from charge conservation in every cell.

:func:`resolve_ionization` turns a user-facing specification (model, name
or array) into a model instance.

Internally all arrays are plain float64 numpy arrays in cgs units; the
public entry points also accept :class:`astropy.units.Quantity` input.
"""

from __future__ import annotations

import abc
import numbers
from dataclasses import dataclass

import astropy.constants as const
import astropy.units as u
import numpy as np
from scipy.special import log_expit

__all__ = [
    "Composition",
    "IonizationModel",
    "FullyIonized",
    "TemperatureThreshold",
    "SuppliedFraction",
    "SahaEquilibrium",
    "resolve_ionization",
    "DEFAULT_HYDROGEN_MASS_FRACTION",
    "DEFAULT_HELIUM_MASS_FRACTION",
    "DEFAULT_THRESHOLD_TEMPERATURE",
]

# ---------------------------------------------------------------------------
# Constants, converted to cgs floats once so the array code stays unit-free.
# ---------------------------------------------------------------------------

#: Electron mass [g].
_M_E = const.m_e.cgs.value
#: Boltzmann constant [erg K^-1].
_K_B = const.k_B.cgs.value
#: Planck constant [erg s].
_H = const.h.cgs.value
#: Atomic mass constant [g].
_M_U = const.u.cgs.value
#: Mass of a hydrogen atom [g]: proton plus electron. The 13.6 eV binding
#: energy (1.5e-8 of the mass) is neglected, which is far below any other
#: uncertainty here. Deuterium (~2.5e-5 by number) is not separated out.
_M_H = (const.m_p + const.m_e).cgs.value
#: Mean mass of a helium atom [g]: the standard atomic weight of helium,
#: 4.002602 (IUPAC, from memory), in atomic mass units.
_HELIUM_ATOMIC_WEIGHT = 4.002602
_M_HE = _HELIUM_ATOMIC_WEIGHT * _M_U
_ERG_PER_EV = u.eV.to(u.erg)

#: Ionization energies [erg] of H I, He I and He II (NIST values,
#: from memory): 13.598434 eV, 24.587389 eV, 54.417765 eV.
_CHI_H = 13.598434 * _ERG_PER_EV
_CHI_HE1 = 24.587389 * _ERG_PER_EV
_CHI_HE2 = 54.417765 * _ERG_PER_EV

#: Ground-state statistical weights (partition functions truncated to the
#: ground level, common practice for Saha estimates of H/He).
_G_HI, _G_HII = 2.0, 1.0
_G_HEI, _G_HEII, _G_HEIII = 1.0, 2.0, 1.0

#: ln of the Saha prefactor 2 g_{r+1} / g_r for each stage.
_LN_W_H = np.log(2.0 * _G_HII / _G_HI)
_LN_W_HE1 = np.log(2.0 * _G_HEII / _G_HEI)
_LN_W_HE2 = np.log(2.0 * _G_HEIII / _G_HEII)

#: ln(2 pi m_e k_B / h^2) [ln(cm^-2 K^-1)]; the thermal de Broglie density
#: is (2 pi m_e k T / h^2)^{3/2}.
_LN_DEBROGLIE_COEFF = np.log(2.0 * np.pi * _M_E * _K_B / _H**2)

_LN2 = np.log(2.0)
_LN4 = np.log(4.0)

#: Default hydrogen and helium mass fractions, X = 0.70 and Y = 0.28
#: (roughly solar/ISM, common practice; recent solar values are close,
#: e.g. X ~ 0.74, Y ~ 0.25, from memory).
DEFAULT_HYDROGEN_MASS_FRACTION = 0.70
DEFAULT_HELIUM_MASS_FRACTION = 0.28

#: Default temperature above which :class:`TemperatureThreshold` treats gas
#: as ionized [K]. Photoionized gas settles near 1e4 K while cold and
#: molecular gas is far cooler; 8000 K sits just below typical H II region
#: temperatures (common practice). Warm neutral gas near 8000 K is the
#: known weakness of any single threshold.
DEFAULT_THRESHOLD_TEMPERATURE = 8000.0

_HELIUM_FULL = ("single", "double")
_HELIUM_SUPPLIED = ("follow", "none", "single", "double")
_MODEL_NAMES = ("full", "threshold", "saha")


# ---------------------------------------------------------------------------
# Input helpers
# ---------------------------------------------------------------------------


def _as_float_array(value, unit, name, equivalencies=None):
    """Convert a Quantity or array-like to a float64 ndarray in ``unit``.

    Parameters
    ----------
    value : array_like or astropy.units.Quantity
        Input; plain numbers are taken to be in ``unit`` already.
    unit : astropy.units.Unit
        Target unit.
    name : str
        Parameter name for error messages.
    equivalencies : list, optional
        Unit equivalencies passed to :meth:`Quantity.to_value`.

    Returns
    -------
    numpy.ndarray
        float64 array (a copy only if conversion requires one).
    """
    if isinstance(value, u.Quantity):
        try:
            value = value.to_value(unit, equivalencies=equivalencies or [])
        except u.UnitConversionError as exc:
            raise ValueError(f"{name}: cannot convert {value.unit} to {unit}") from exc
    try:
        return np.asarray(value, dtype=np.float64)
    except (TypeError, ValueError) as exc:
        raise ValueError(f"{name}: expected a numeric array, got {type(value).__name__}") from exc


def _check_finite_nonnegative(arr, name, unit_text):
    """Raise ValueError naming ``name`` if any cell is negative or non-finite."""
    bad = ~np.isfinite(arr) | (arr < 0.0)
    nbad = int(np.count_nonzero(bad))
    if nbad:
        raise ValueError(
            f"{name}: {nbad} of {arr.size} cells are negative or not finite "
            f"(expected finite values >= 0 {unit_text})"
        )


def _check_helium(helium, allowed, model):
    """Validate a helium-mode string and return it."""
    if not isinstance(helium, str) or helium not in allowed:
        raise ValueError(
            f"helium: {helium!r} is not valid for {model}; choose one of {', '.join(allowed)}"
        )
    return helium


def _helium_charge_and_ion_weight(helium):
    """Electrons per He atom and Z^2-weighted ions per He atom for a full state."""
    # He II has Z = 1 (one electron freed, ion term weight 1); He III has
    # Z = 2 (two electrons freed, ion term weight Z^2 = 4).
    return {"none": (0.0, 0.0), "single": (1.0, 1.0), "double": (2.0, 4.0)}[helium]


# ---------------------------------------------------------------------------
# Composition
# ---------------------------------------------------------------------------


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
    no electrons and no ions to the free-free terms.

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
                except u.UnitConversionError as exc:
                    raise ValueError(f"{name}: mass fraction must be dimensionless") from exc
            try:
                val = float(raw)
            except (TypeError, ValueError) as exc:
                raise ValueError(f"{name}: mass fraction must be a number, got {raw!r}") from exc
            if not np.isfinite(val) or val < 0.0 or val > 1.0:
                raise ValueError(f"{name}: mass fraction must lie in [0, 1], got {val!r}")
            # frozen dataclass: store the cleaned float through object.__setattr__
            object.__setattr__(self, name, val)
        # Allow a rounding-level excess so that e.g. 0.7 + 0.3 is accepted.
        if self.hydrogen + self.helium > 1.0 + 1e-12:
            raise ValueError(
                f"hydrogen, helium: X + Y = {self.hydrogen + self.helium!r} exceeds 1"
            )

    @property
    def metals(self) -> float:
        """Metal mass fraction ``1 - X - Y`` (dimensionless, >= 0)."""
        return max(0.0, 1.0 - self.hydrogen - self.helium)

    def hydrogen_number_density(self, rho_cgs) -> np.ndarray:
        """Number density of hydrogen nuclei, ``n_H = X rho / m_H``.

        Parameters
        ----------
        rho_cgs : array_like or astropy.units.Quantity
            Mass density in g cm^-3.

        Returns
        -------
        numpy.ndarray
            float64 ``n_H`` in cm^-3, same shape as ``rho_cgs``.
        """
        rho = _as_float_array(rho_cgs, u.g / u.cm**3, "rho")
        return self.hydrogen * rho / _M_H

    def helium_number_density(self, rho_cgs) -> np.ndarray:
        """Number density of helium nuclei, ``n_He = Y rho / (4.002602 m_u)``.

        Parameters
        ----------
        rho_cgs : array_like or astropy.units.Quantity
            Mass density in g cm^-3.

        Returns
        -------
        numpy.ndarray
            float64 ``n_He`` in cm^-3, same shape as ``rho_cgs``.
        """
        rho = _as_float_array(rho_cgs, u.g / u.cm**3, "rho")
        return self.helium * rho / _M_HE

    def describe(self) -> str:
        """Short text ``"X=..., Y=..."`` for provenance strings."""
        return f"X={self.hydrogen:g}, Y={self.helium:g}"


# ---------------------------------------------------------------------------
# Models
# ---------------------------------------------------------------------------


class IonizationModel(abc.ABC):
    """Interface: map ``(rho, T, fields)`` to ``(n_e, ion_term)``.

    Subclasses implement :meth:`_terms` on validated float64 arrays and
    :meth:`describe`.

    Parameters
    ----------
    composition : Composition, optional
        H/He mass fractions; default ``Composition()`` (X=0.70, Y=0.28).
    """

    def __init__(self, composition: Composition | None = None):
        if composition is None:
            composition = Composition()
        if not isinstance(composition, Composition):
            raise ValueError(
                f"composition: expected a Composition, got {type(composition).__name__}"
            )
        self.composition = composition

    def electron_and_ion_terms(self, rho, T, fields=None):
        """Electron density and charge-weighted ion density in every cell.

        Parameters
        ----------
        rho : numpy.ndarray or astropy.units.Quantity
            Mass density in g cm^-3 (finite, >= 0).
        T : numpy.ndarray or astropy.units.Quantity
            Temperature in K (finite, >= 0). Must broadcast against ``rho``.
        fields : dict of str to numpy.ndarray, optional
            Extra snapshot fields; used by :class:`SuppliedFraction` when it
            was given a field name. May be empty or None.

        Returns
        -------
        n_e : numpy.ndarray
            Electron number density, cm^-3, float64, broadcast shape of
            ``rho`` and ``T``.
        ion_term : numpy.ndarray
            ``sum_i Z_i^2 n_i`` over H II, He II (Z=1) and He III (Z=2),
            cm^-3, float64, same shape.

        Raises
        ------
        ValueError
            If ``rho`` or ``T`` has negative or non-finite cells, or the
            shapes do not broadcast.
        """
        rho_a = _as_float_array(rho, u.g / u.cm**3, "rho")
        T_a = _as_float_array(T, u.K, "T", equivalencies=u.temperature())
        try:
            rho_a, T_a = np.broadcast_arrays(rho_a, T_a)
        except ValueError as exc:
            raise ValueError(
                f"rho, T: shapes {rho_a.shape} and {T_a.shape} do not broadcast"
            ) from exc
        _check_finite_nonnegative(rho_a, "rho", "g cm^-3")
        _check_finite_nonnegative(T_a, "T", "K")
        n_e, ion = self._terms(rho_a, T_a, {} if fields is None else fields)
        # Return fresh, writable float64 arrays even when inputs were broadcast views.
        return (np.array(n_e, dtype=np.float64, copy=True),
                np.array(ion, dtype=np.float64, copy=True))

    @abc.abstractmethod
    def _terms(self, rho, T, fields):
        """Compute ``(n_e, ion_term)`` on validated float64 arrays (cgs)."""

    @abc.abstractmethod
    def describe(self) -> str:
        """One-line description for provenance headers."""

    def __repr__(self) -> str:
        return f"<{type(self).__name__} {self.describe()}>"


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
        He II edge (common practice).
    """

    def __init__(self, composition: Composition | None = None, helium: str = "single"):
        super().__init__(composition)
        self.helium = _check_helium(helium, _HELIUM_FULL, "FullyIonized")

    def _ionized_terms(self, rho):
        n_h = self.composition.hydrogen_number_density(rho)
        n_he = self.composition.helium_number_density(rho)
        e_per_he, ion_per_he = _helium_charge_and_ion_weight(self.helium)
        return n_h + e_per_he * n_he, n_h + ion_per_he * n_he

    def _terms(self, rho, T, fields):
        return self._ionized_terms(rho)

    def describe(self) -> str:
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

    def __init__(self, threshold=DEFAULT_THRESHOLD_TEMPERATURE,
                 composition: Composition | None = None, helium: str = "single"):
        super().__init__(composition, helium)
        arr = _as_float_array(threshold, u.K, "threshold", equivalencies=u.temperature())
        if arr.ndim != 0 or not np.isfinite(arr) or arr <= 0.0:
            raise ValueError(f"threshold: expected one finite temperature > 0 K, got {threshold!r}")
        self.threshold = float(arr)

    def _terms(self, rho, T, fields):
        n_e, ion = self._ionized_terms(rho)
        hot = T >= self.threshold
        return np.where(hot, n_e, 0.0), np.where(hot, ion, 0.0)

    def describe(self) -> str:
        return (f"threshold(T>={self.threshold:g} K, {self.composition.describe()}, "
                f"He={self.helium})")


class SuppliedFraction(IonizationModel):
    """Hydrogen ionized fraction supplied per cell by the snapshot.

    Parameters
    ----------
    fraction : numpy.ndarray, astropy.units.Quantity, float or str
        Hydrogen ionized fraction ``x = n_HII / n_H`` (dimensionless, finite,
        in [0, 1]); must broadcast against ``rho``. A string names an entry
        of the ``fields`` dict passed to :meth:`electron_and_ion_terms`,
        validated when it is read.
    composition : Composition, optional
        H/He mass fractions; default X=0.70, Y=0.28.
    helium : {"follow", "none", "single", "double"}
        ``"follow"`` (default): He is singly ionized with the same fraction
        ``x`` as hydrogen, since He I and H I are ionized together in most
        H II regions (common practice). ``"none"``: He neutral.
        ``"single"``/``"double"``: He fully He II/He III regardless of ``x``.

    Raises
    ------
    ValueError
        If the fraction has non-finite cells or cells outside [0, 1]; the
        message names the field and counts the bad cells.
    """

    def __init__(self, fraction, composition: Composition | None = None,
                 helium: str = "follow"):
        super().__init__(composition)
        self.helium = _check_helium(helium, _HELIUM_SUPPLIED, "SuppliedFraction")
        if isinstance(fraction, str):
            self.field_name = fraction
            self.fraction = None
        else:
            self.field_name = None
            self.fraction = self._validated(fraction, "fraction")

    @staticmethod
    def _validated(fraction, name):
        if isinstance(fraction, u.Quantity):
            try:
                fraction = fraction.to_value(u.dimensionless_unscaled)
            except u.UnitConversionError as exc:
                raise ValueError(
                    f"{name}: ionized fraction must be dimensionless, got unit {fraction.unit}"
                ) from exc
        arr = _as_float_array(fraction, u.dimensionless_unscaled, name)
        nonfinite = ~np.isfinite(arr)
        with np.errstate(invalid="ignore"):
            outside = ~nonfinite & ((arr < 0.0) | (arr > 1.0))
        n_nonfinite = int(np.count_nonzero(nonfinite))
        n_outside = int(np.count_nonzero(outside))
        if n_nonfinite or n_outside:
            raise ValueError(
                f"{name}: {n_nonfinite + n_outside} of {arr.size} cells are invalid "
                f"({n_nonfinite} not finite, {n_outside} outside [0, 1]); "
                "the hydrogen ionized fraction must be finite and within [0, 1]"
            )
        return arr

    def _terms(self, rho, T, fields):
        if self.field_name is not None:
            if self.field_name not in fields:
                raise ValueError(
                    f"fields: ionized-fraction field {self.field_name!r} not found; "
                    f"available: {sorted(fields)}"
                )
            x = self._validated(fields[self.field_name], repr(self.field_name))
            label = repr(self.field_name)
        else:
            x = self.fraction
            label = "fraction"
        try:
            x = np.broadcast_to(x, rho.shape)
        except ValueError as exc:
            raise ValueError(
                f"{label}: shape {np.shape(x)} does not broadcast to the grid shape {rho.shape}"
            ) from exc
        n_h = self.composition.hydrogen_number_density(rho)
        n_he = self.composition.helium_number_density(rho)
        if self.helium == "follow":
            # He II with the same fraction: Z = 1, one electron each.
            he_e = x * n_he
            he_ion = he_e
        else:
            e_per_he, ion_per_he = _helium_charge_and_ion_weight(self.helium)
            he_e, he_ion = e_per_he * n_he, ion_per_he * n_he
        n_hii = x * n_h
        return n_hii + he_e, n_hii + he_ion

    def describe(self) -> str:
        if self.field_name is not None:
            src = f"field={self.field_name!r}"
        else:
            x = self.fraction
            if x.size:
                src = f"fraction=array(shape={x.shape}, min={x.min():g}, max={x.max():g})"
            else:
                src = f"fraction=array(shape={x.shape})"
        return f"supplied({src}, {self.composition.describe()}, He={self.helium})"


class SahaEquilibrium(IonizationModel):
    """Local thermodynamic (Saha) equilibrium for hydrogen and helium.

    For each stage ``r -> r+1`` (H I->H II, He I->He II, He II->He III)

    .. math::
        \\frac{n_{r+1} n_e}{n_r} = S_r(T) = \\frac{2 g_{r+1}}{g_r}
        \\left(\\frac{2\\pi m_e k T}{h^2}\\right)^{3/2} e^{-\\chi_r / kT},

    with ground-state weights g(H I)=2, g(H II)=1, g(He I)=1, g(He II)=2,
    g(He III)=1 and ionization energies 13.598434, 24.587389 and
    54.417765 eV. The electron density closes the system through charge
    conservation ``n_e = n_HII + n_HeII + 2 n_HeIII``, solved per cell.

    Parameters
    ----------
    composition : Composition, optional
        H/He mass fractions; default X=0.70, Y=0.28.
    tolerance : float
        Convergence tolerance on ``ln n_e`` (i.e. relative on ``n_e``),
        scaled by ``|ln n_e|`` where that exceeds 1. Default 1e-12.
    max_iterations : int
        Iteration cap of the safeguarded Newton solver. Default 200.

    Notes
    -----
    The right-hand side of charge conservation decreases monotonically with
    ``n_e`` (each ion's mean charge falls as ``n_e`` rises), so the root is
    unique. The solver works on ``u = ln n_e`` with all Saha factors kept
    as logarithms, which is what keeps 1 K (``exp(-chi/kT)`` ~ 1e-68500)
    and 1e9 K finite. The bracket is ``[ln g(N), ln N]``, where
    ``N = n_H + 2 n_He`` is the electron density of complete ionization
    and ``g`` is the right-hand side of charge conservation: since ``g``
    decreases, the root ``n_e* <= N`` obeys ``n_e* = g(n_e*) >= g(N)``.
    Newton steps that leave the current bracket are replaced by bisection,
    and all cells are updated together (no loop over cells).

    In the deep neutral limit the true ``n_e`` can be below the smallest
    float64 (e.g. ~1e-34000 cm^-3 at 1 K); it is then returned as 0.

    Not included: pressure ionization and partition-function truncation at
    high density, molecules, pair creation above ~1e9 K, and
    non-equilibrium or photoionization effects.
    """

    def __init__(self, composition: Composition | None = None,
                 tolerance: float = 1e-12, max_iterations: int = 200):
        super().__init__(composition)
        tolerance = float(tolerance)
        if not np.isfinite(tolerance) or tolerance <= 0.0:
            raise ValueError(f"tolerance: must be finite and > 0, got {tolerance!r}")
        if int(max_iterations) < 1:
            raise ValueError(f"max_iterations: must be >= 1, got {max_iterations!r}")
        self.tolerance = tolerance
        self.max_iterations = int(max_iterations)

    # -- Saha factors -------------------------------------------------------

    @staticmethod
    def _log_saha_factors(T):
        """Natural logs of S_H, S_He1, S_He2 [ln cm^-3] for ``T > 0`` (K)."""
        kT = _K_B * T
        ln_lambda = 1.5 * (_LN_DEBROGLIE_COEFF + np.log(T))
        return (_LN_W_H + ln_lambda - _CHI_H / kT,
                _LN_W_HE1 + ln_lambda - _CHI_HE1 / kT,
                _LN_W_HE2 + ln_lambda - _CHI_HE2 / kT)

    @staticmethod
    def _log_charge_supply(uu, ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2):
        """ln g(u), d ln g / du and the pieces needed for species fractions.

        ``g(n_e) = n_H x_H(n_e) + n_He zbar(n_e)``: electrons released by the
        ions when the electron density is ``n_e = exp(u)``.
        """
        # Hydrogen: x_H = S_H / (S_H + n_e) = expit(ln S_H - u).
        ln_xh = log_expit(ln_sh - uu)
        ln_h = ln_nh + ln_xh
        # Helium stage populations ∝ 1, S1/n_e, S1 S2/n_e^2; multiply by n_e^2
        # to get log-weights that never need a division.
        w0 = 2.0 * uu
        w1 = ln_s1 + uu
        w2 = ln_s1 + ln_s2
        ln_den = np.logaddexp(np.logaddexp(w0, w1), w2)
        ln_q1 = np.logaddexp(w1, _LN2 + w2)          # ln sum k p_k (unnormalised)
        ln_q2 = np.logaddexp(w1, _LN4 + w2)          # ln sum k^2 p_k (unnormalised)
        ln_zbar = ln_q1 - ln_den
        ln_he = ln_nhe + ln_zbar
        ln_g = np.logaddexp(ln_h, ln_he)
        # d g/du: hydrogen -h (1 - x_H); helium -n_He Var(k), where
        # Var(k)/zbar = <k^2>/<k> - <k> is bounded by 2 (k in {0, 1, 2}).
        one_minus_xh = np.exp(log_expit(uu - ln_sh))
        var_over_mean = np.exp(ln_q2 - ln_q1) - np.exp(ln_zbar)
        frac_h = np.exp(ln_h - ln_g)
        frac_he = np.exp(ln_he - ln_g)
        dlng = -(frac_h * one_minus_xh + frac_he * var_over_mean)
        return ln_g, dlng, ln_xh, (w0, w1, w2, ln_den)

    def _solve(self, ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2):
        """Solve ``ln g(u) = u`` for every cell; returns ``u = ln n_e``."""
        ln_ntot = np.logaddexp(ln_nh, _LN2 + ln_nhe)   # ln N, full ionization
        hi = ln_ntot.copy()
        lo, _, _, _ = self._log_charge_supply(hi, ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2)
        lo = np.minimum(lo, hi)
        uu = hi.copy()
        for _ in range(self.max_iterations):
            ln_g, dlng, _, _ = self._log_charge_supply(uu, ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2)
            resid = ln_g - uu                      # decreasing in u
            deriv = dlng - 1.0                     # <= -1, never zero
            # Shrink the bracket with the sign of the residual at the current point.
            pos = resid > 0.0
            lo = np.where(pos, uu, lo)
            hi = np.where(pos, hi, uu)
            delta = resid / deriv
            newton = uu - delta
            inside = (newton > lo) & (newton < hi)
            # Absolute tolerance on u is a relative one on n_e. Far in the
            # neutral limit |u| reaches ~1e5, where float64 spacing of u alone
            # exceeds 1e-12, so scale by |u| there (n_e underflows to 0 anyway).
            tol = self.tolerance * np.maximum(1.0, np.abs(uu))
            # A Newton step below tolerance means u is already the root; test it
            # before the bracket check, because such a step can round onto a
            # bracket end and would otherwise trigger needless bisection.
            converged = (np.abs(delta) <= tol) | (hi - lo <= tol)
            uu = np.where(converged, np.clip(newton, lo, hi),
                          np.where(inside, newton, 0.5 * (lo + hi)))
            if np.all(converged):
                break
        else:
            raise RuntimeError(
                f"SahaEquilibrium: n_e did not converge in {self.max_iterations} iterations"
            )
        return uu

    def species_densities(self, rho, T):
        """Number densities of all species in Saha equilibrium.

        Parameters
        ----------
        rho : numpy.ndarray or astropy.units.Quantity
            Mass density in g cm^-3 (finite, >= 0).
        T : numpy.ndarray or astropy.units.Quantity
            Temperature in K (finite, >= 0), broadcast against ``rho``.

        Returns
        -------
        dict of str to numpy.ndarray
            Keys ``"n_e", "n_HI", "n_HII", "n_HeI", "n_HeII", "n_HeIII"``,
            float64 arrays in cm^-3.
        """
        rho_a = _as_float_array(rho, u.g / u.cm**3, "rho")
        T_a = _as_float_array(T, u.K, "T", equivalencies=u.temperature())
        try:
            rho_a, T_a = np.broadcast_arrays(rho_a, T_a)
        except ValueError as exc:
            raise ValueError(
                f"rho, T: shapes {rho_a.shape} and {T_a.shape} do not broadcast"
            ) from exc
        _check_finite_nonnegative(rho_a, "rho", "g cm^-3")
        _check_finite_nonnegative(T_a, "T", "K")
        return self._species(rho_a, T_a)

    def _species(self, rho, T):
        n_h = self.composition.hydrogen_number_density(rho)
        n_he = self.composition.helium_number_density(rho)
        shape = rho.shape
        out = {k: np.zeros(shape) for k in ("n_e", "n_HII", "n_HeII", "n_HeIII")}
        out["n_HI"] = np.array(n_h, dtype=np.float64, copy=True)
        out["n_HeI"] = np.array(n_he, dtype=np.float64, copy=True)
        # Cells with no gas or T = 0 stay neutral (the T -> 0 limit) and are
        # kept out of the solver, whose logs need n > 0 and T > 0.
        active = (T > 0.0) & ((n_h > 0.0) | (n_he > 0.0))
        if not np.any(active):
            return out
        # log(0) = -inf is intended for a missing element; logaddexp handles it.
        with np.errstate(divide="ignore"):
            ln_nh = np.log(n_h[active])
            ln_nhe = np.log(n_he[active])
        ln_sh, ln_s1, ln_s2 = self._log_saha_factors(T[active])
        with np.errstate(under="ignore", invalid="ignore"):
            uu = self._solve(ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2)
            _, _, ln_xh, (w0, w1, w2, ln_den) = self._log_charge_supply(
                uu, ln_nh, ln_nhe, ln_sh, ln_s1, ln_s2)
            nh_a, nhe_a = n_h[active], n_he[active]
            n_hii = np.exp(ln_nh + ln_xh)
            out["n_e"][active] = np.exp(uu)
            out["n_HII"][active] = n_hii
            # Neutral H via 1 - x_H = expit(u - ln S_H), exact even when x_H ~ 1.
            out["n_HI"][active] = nh_a * np.exp(log_expit(uu - ln_sh))
            out["n_HeI"][active] = nhe_a * np.exp(w0 - ln_den)
            out["n_HeII"][active] = nhe_a * np.exp(w1 - ln_den)
            out["n_HeIII"][active] = nhe_a * np.exp(w2 - ln_den)
        return out

    def _terms(self, rho, T, fields):
        sp = self._species(rho, T)
        # Z^2 weights: H II and He II have Z = 1, He III has Z = 2.
        return sp["n_e"], sp["n_HII"] + sp["n_HeII"] + 4.0 * sp["n_HeIII"]

    def describe(self) -> str:
        return f"saha({self.composition.describe()})"


# ---------------------------------------------------------------------------
# Dispatch
# ---------------------------------------------------------------------------


def resolve_ionization(spec, composition: Composition | None = None,
                       helium: str | None = None) -> IonizationModel:
    """Turn a user-facing ionization specification into a model.

    Parameters
    ----------
    spec : IonizationModel, str, numpy.ndarray, astropy.units.Quantity or float
        * an :class:`IonizationModel`: returned as is (``composition`` and
          ``helium`` are then ignored, the model already carries its own);
        * ``"full"`` -> :class:`FullyIonized`, ``"threshold"`` ->
          :class:`TemperatureThreshold` (default threshold),
          ``"saha"`` -> :class:`SahaEquilibrium` (case-insensitive);
        * an array, dimensionless Quantity or number: the hydrogen ionized
          fraction -> :class:`SuppliedFraction`.
    composition : Composition, optional
        Mass fractions for a newly built model; default X=0.70, Y=0.28.
    helium : str, optional
        Helium mode for a newly built model; default ``"single"`` for
        ``"full"``/``"threshold"`` and ``"follow"`` for a supplied fraction.
        Not accepted with ``"saha"``, which computes the helium state.

    Returns
    -------
    IonizationModel

    Raises
    ------
    ValueError
        Unknown model name (the message lists the valid names), or
        ``helium`` given with ``"saha"``.
    TypeError
        ``spec`` of an unsupported type.
    """
    if isinstance(spec, IonizationModel):
        return spec
    if isinstance(spec, str):
        name = spec.strip().lower()
        if name == "full":
            return FullyIonized(composition, helium or "single")
        if name == "threshold":
            return TemperatureThreshold(composition=composition, helium=helium or "single")
        if name == "saha":
            if helium is not None:
                raise ValueError(
                    "helium: not used by 'saha', which solves for the helium ionization state"
                )
            return SahaEquilibrium(composition)
        raise ValueError(
            f"spec: unknown ionization model {spec!r}; valid names: {', '.join(_MODEL_NAMES)} "
            "(or an ionized-fraction array)"
        )
    if isinstance(spec, (np.ndarray, u.Quantity)) or (
            isinstance(spec, numbers.Real) and not isinstance(spec, bool)):
        return SuppliedFraction(spec, composition, helium or "follow")
    raise TypeError(
        f"spec: expected an IonizationModel, one of {', '.join(_MODEL_NAMES)}, "
        f"or an ionized-fraction array; got {type(spec).__name__}"
    )
