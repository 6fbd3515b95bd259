"""Thermal free-free (bremsstrahlung) emission and absorption coefficients.

Both coefficients are for a Maxwellian, non-relativistic plasma, valid below
about 1e9 K (common practice); above that a :class:`PhysicsRangeWarning` is
issued. ``ion_density`` is the ion term ``sum_i Z_i^2 n_i``; it defaults to
the electron density (pure hydrogen). The Gaunt factor is evaluated for Z = 1.
"""

import astropy.units as u
import numpy as np

from ..errors import warn_user
from .constants import ALPHA_FF_PREFACTOR, EMISSIVITY_FF_PREFACTOR, H_OVER_K
from .gaunt import gaunt_cgs

__all__ = [
    "absorption_coefficient", "emission_coefficient",
    "absorption_cgs", "emission_cgs", "check_temperature_range", "warn_relativistic",
    "RELATIVISTIC_TEMPERATURE",
]

RELATIVISTIC_TEMPERATURE = 1.0e9   # K; common practice for the onset of relativistic corrections
EMISSIVITY_UNIT = u.erg / (u.s * u.cm**3 * u.Hz * u.sr)


def check_temperature_range(temperature_k, what="temperature"):
    """Warn if any temperature exceeds :data:`RELATIVISTIC_TEMPERATURE`."""
    warn_relativistic(int(np.count_nonzero(np.asarray(temperature_k) > RELATIVISTIC_TEMPERATURE)), what)


def warn_relativistic(n_hot, what="temperature"):
    """Warn that ``n_hot`` cells lie above :data:`RELATIVISTIC_TEMPERATURE` (nothing if none)."""
    if n_hot:
        warn_user(f"{what}: {n_hot} cell(s) above {RELATIVISTIC_TEMPERATURE:.0e} K, where the "
                  "non-relativistic free-free treatment loses accuracy")


def absorption_cgs(nu, temperature, ne, ni):
    """alpha_nu in cm-1 for plain cgs arrays.

    Rybicki & Lightman (1979), eq. 5.18b, with the exact stimulated-emission
    factor ``1 - e^{-h nu/kT}`` (written ``-expm1(-u)``, exact for any u).
    """
    nu = np.asarray(nu, float)
    t = np.asarray(temperature, float)
    x = H_OVER_K * nu / t
    return (ALPHA_FF_PREFACTOR * np.asarray(ne, float) * np.asarray(ni, float)
            / (np.sqrt(t) * nu**3) * -np.expm1(-x) * gaunt_cgs(nu, t))


def emission_cgs(nu, temperature, ne, ni):
    """j_nu in erg s-1 cm-3 Hz-1 sr-1 for plain cgs arrays.

    Rybicki & Lightman (1979), eq. 5.14b gives ``4 pi j_nu``; isotropic emission.
    """
    nu = np.asarray(nu, float)
    t = np.asarray(temperature, float)
    x = H_OVER_K * nu / t
    return (EMISSIVITY_FF_PREFACTOR / (4.0 * np.pi) * np.asarray(ne, float) * np.asarray(ni, float)
            / np.sqrt(t) * np.exp(-x) * gaunt_cgs(nu, t))


def _inputs(frequency, temperature, electron_density, ion_density):
    nu = u.Quantity(frequency).to_value(u.Hz, equivalencies=u.spectral())
    t = u.Quantity(temperature).to_value(u.K, equivalencies=u.temperature())
    ne = u.Quantity(electron_density).to_value(u.cm**-3)
    ni = ne if ion_density is None else u.Quantity(ion_density).to_value(u.cm**-3)
    check_temperature_range(t)
    return nu, t, ne, ni


def absorption_coefficient(frequency, temperature, electron_density, ion_density=None):
    """Free-free absorption coefficient ``alpha_nu`` (stimulated emission included).

    Parameters
    ----------
    frequency : `~astropy.units.Quantity`
        Frequency (spectral unit).
    temperature : `~astropy.units.Quantity`
        Electron temperature (K).
    electron_density : `~astropy.units.Quantity`
        Electron number density (cm-3).
    ion_density : `~astropy.units.Quantity`, optional
        Ion term ``sum_i Z_i^2 n_i`` (cm-3); defaults to ``electron_density``.

    Returns
    -------
    `~astropy.units.Quantity`
        ``alpha_nu`` in cm-1, broadcast over the inputs.
    """
    return absorption_cgs(*_inputs(frequency, temperature, electron_density, ion_density)) / u.cm


def emission_coefficient(frequency, temperature, electron_density, ion_density=None):
    """Free-free emission coefficient ``j_nu`` per steradian.

    Same parameters as :func:`absorption_coefficient`; returns a Quantity in
    erg s-1 cm-3 Hz-1 sr-1. In LTE ``j_nu / alpha_nu = B_nu(T)`` (Kirchhoff).
    """
    return emission_cgs(*_inputs(frequency, temperature, electron_density, ion_density)) * EMISSIVITY_UNIT
