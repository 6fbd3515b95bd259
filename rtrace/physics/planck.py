"""The Planck function, evaluated without overflow or loss of precision.

``B_nu(T) = (2 h nu^3 / c^2) / (exp(h nu / k T) - 1)`` (Rybicki & Lightman 1979,
eq. 1.51). For small ``x = h nu / kT`` we use ``expm1`` (no cancellation); for
large ``x`` the form ``e^{-x} / (1 - e^{-x})`` never overflows, so the function
is exact to rounding for ``x`` from 1e-8 up to the float64 underflow near 745.
"""

import math

import astropy.units as u
import numba
import numpy as np

from .constants import H_OVER_K, C, H

__all__ = [
    "planck",
    "planck_cgs",
    "planck_scalar",
    "inverse_planck_cgs",
    "one_minus_exp",
    "one_minus_exp_series",
    "inverse_expm1",
    "SERIES_LIMIT",
]

# Below this argument the Taylor series in ``one_minus_exp`` and ``inverse_expm1`` are exact to
# double precision (the first omitted terms are < 1e-14 relative).
SERIES_LIMIT = 1.0e-3


@numba.njit(cache=True, inline="always")
def one_minus_exp_series(x):
    """``1 - e^{-x}`` by its Taylor series to x^5 (A&S 4.2.1): exact to rounding for ``0 <= x < SERIES_LIMIT``."""
    return x * (1.0 - x * (0.5 - x * (1.0 / 6.0 - x * (1.0 / 24.0 - x * (1.0 / 120.0)))))


@numba.njit(cache=True, inline="always")
def one_minus_exp(x):
    """``1 - e^{-x}`` for ``x >= 0``, exact to rounding (Taylor series below SERIES_LIMIT, A&S 4.2.1)."""
    if x < SERIES_LIMIT:
        return one_minus_exp_series(x)
    return -math.expm1(-x)


@numba.njit(cache=True, inline="always")
def inverse_expm1(x):
    """``1 / (e^x - 1)`` for ``x > 0`` without overflow (Bernoulli series below SERIES_LIMIT, A&S 23.1.1)."""
    if x < SERIES_LIMIT:
        return 1.0 / x - 0.5 + x * (1.0 / 12.0 - x * x * (1.0 / 720.0))
    return math.exp(-x) / -math.expm1(-x)


_INTENSITY = u.erg / (u.s * u.cm**2 * u.Hz * u.sr)


@numba.njit(cache=True, fastmath=False)
def planck_scalar(nu, temperature):
    """Planck specific intensity in erg s-1 cm-2 Hz-1 sr-1 (numba core)."""
    x = H_OVER_K * nu / temperature
    pref = 2.0 * H * nu**3 / C**2
    if x < 1.0:
        return pref / math.expm1(x)
    e = math.exp(-x)
    return pref * e / (-math.expm1(-x))


@numba.vectorize(["float64(float64, float64)"], cache=True)
def planck_cgs(nu, temperature):
    """Vectorised Planck function: ``nu`` in Hz, ``temperature`` in K, result in cgs."""
    return planck_scalar(nu, temperature)


def planck(frequency, temperature):
    """Planck specific intensity ``B_nu(T)``.

    Parameters
    ----------
    frequency : `~astropy.units.Quantity`
        Frequency (any spectral unit convertible to Hz).
    temperature : `~astropy.units.Quantity`
        Temperature in K (or convertible).

    Returns
    -------
    `~astropy.units.Quantity`
        Intensity in erg s-1 cm-2 Hz-1 sr-1, broadcast over the inputs.
    """
    nu = u.Quantity(frequency).to_value(u.Hz, equivalencies=u.spectral())
    t = u.Quantity(temperature).to_value(u.K, equivalencies=u.temperature())
    return planck_cgs(np.asarray(nu, float), np.asarray(t, float)) * _INTENSITY


def inverse_planck_cgs(nu, intensity):
    """Temperature (K) at which ``B_nu(T)`` equals ``intensity`` (cgs); 0 where it is 0, NaN where negative.

    ``T = (h nu / k) / ln(1 + 2 h nu^3 / (c^2 I))``, written with ``log1p`` so the
    Rayleigh-Jeans end keeps full precision; its limit for ``I -> 0+`` is 0 K.
    """
    nu = np.asarray(nu, float)
    intensity = np.asarray(intensity, float)
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = 2.0 * H * nu**3 / (C**2 * intensity)
        t = H_OVER_K * nu / np.log1p(ratio)
    return np.where(intensity > 0, t, np.where(intensity == 0, 0.0, np.nan))
