r"""Ionization state of the gas: electron density and the free-free ion term.

Thermal free-free (bremsstrahlung) emission and absorption scale with the
product of the electron density and the charge-weighted ion density,

.. math:: n_e \sum_i Z_i^2 n_i ,

so these models turn a hydrodynamics snapshot's mass density ``rho``
(g cm^-3) and temperature ``T`` (K) into the number densities of H I,
H II, He I, He II, He III and electrons, and from them ``n_e`` and
``ion_term = sum_i Z_i^2 n_i`` (both cm^-3).

Which model for which snapshot:

* a radiation-hydrodynamics run that wrote its own fractions:
  :class:`SuppliedFraction` (hydrogen, and helium's or a rule);
* shock-heated or hot gas (supernova remnants, wind bubbles, the
  galaxy-scale ISM): :class:`CollisionalEquilibrium` (``"collisional"``);
* stars in a run without radiative transfer: :class:`IonizingSources`
  (photoionization equilibrium around point sources, with shadows);
* dense gas in local thermodynamic equilibrium (stellar interiors, dense
  disc midplanes): :class:`SahaEquilibrium` (``"saha"``), which warns when
  the gas is far too thin for it;
* quick looks: :class:`FullyIonized` (``"full"``) and
  :class:`TemperatureThreshold` (``"threshold"``).

:func:`resolve_ionization` turns a user-facing specification (model, name
or array) into a model instance. Internally all arrays are float64 numpy
arrays in cgs units; the public entry points also accept
:class:`astropy.units.Quantity` input.
"""

from .base import IonizationModel
from .collisional import CollisionalEquilibrium
from .composition import DEFAULT_HELIUM_MASS_FRACTION, DEFAULT_HYDROGEN_MASS_FRACTION, Composition
from .resolve import DEFAULT_MODEL, MODEL_NAMES, RESERVED_NAMES, resolve_ionization
from .saha import SahaEquilibrium
from .simple import DEFAULT_THRESHOLD_TEMPERATURE, FullyIonized, TemperatureThreshold
from .sources import IonizingSources
from .supplied import SuppliedFraction

__all__ = [
    "Composition",
    "IonizationModel",
    "FullyIonized",
    "TemperatureThreshold",
    "SuppliedFraction",
    "SahaEquilibrium",
    "CollisionalEquilibrium",
    "IonizingSources",
    "resolve_ionization",
    "MODEL_NAMES",
    "RESERVED_NAMES",
    "DEFAULT_MODEL",
    "DEFAULT_HYDROGEN_MASS_FRACTION",
    "DEFAULT_HELIUM_MASS_FRACTION",
    "DEFAULT_THRESHOLD_TEMPERATURE",
]
