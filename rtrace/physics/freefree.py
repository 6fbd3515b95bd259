"""Thermal free-free (bremsstrahlung) emission and absorption coefficients.

Both coefficients are for a Maxwellian, non-relativistic electron-ion plasma.
From :data:`RELATIVISTIC_TEMPERATURE` (1e8 K) a :class:`~rtrace.errors.RelativisticWarning`
says that relativistic corrections and electron-electron bremsstrahlung,
neither included, reach several percent; outside the Gaunt factor table
(1 K to 1e10 K) a :class:`~rtrace.errors.GauntRangeWarning` counts the cells.
Below the local plasma frequency radiation does not propagate at all;
:func:`check_plasma_frequency` warns when a traced frequency comes near it.

``ion_density`` is the ion term ``sum_i Z_i^2 n_i``; it defaults to the
electron density (pure hydrogen). The Gaunt factor depends on the ion charge:
for hydrogen-helium gas ``sum Z^2 n_i - n_e = 2 n_HeIII`` (charge neutrality),
so the He III share of the ion term is ``2 (1 - n_e / ion term)``
(:func:`helium3_share`); that share takes the Z = 2 Gaunt factor, the rest
Z = 1, exactly as the tracer's kernels do. An ion term that includes ions
heavier than helium is outside this description.
"""

import math

import astropy.units as u
import numpy as np

from ..errors import GauntRangeWarning, InputError, RelativisticWarning, warn_user
from .constants import ALPHA_FF_PREFACTOR, E_CHARGE, EMISSIVITY_FF_PREFACTOR, H_OVER_K, M_E
from .gaunt import LOG_T_MAX, LOG_T_MIN, gaunt_cgs

__all__ = [
    "absorption_coefficient",
    "emission_coefficient",
    "absorption_cgs",
    "emission_cgs",
    "check_temperature_range",
    "warn_relativistic",
    "RELATIVISTIC_TEMPERATURE",
    "GAUNT_TABLE_RANGE",
    "plasma_frequency_cgs",
    "check_plasma_frequency",
    "PLASMA_MARGIN",
    "helium3_share",
    "RELATIVISTIC_CORRECTION",
]

#: Temperature (K) from which a warning says that relativistic corrections and electron-electron
#: bremsstrahlung (neither included) matter: kT / m_e c^2 = 1.7% at 1e8 K.
RELATIVISTIC_TEMPERATURE = 1.0e8
#: Relative size of what is neglected, per kelvin: the frequency-integrated thermal bremsstrahlung of
#: hydrogen is about (1 + 4.4e-10 T/K) times the non-relativistic value once the relativistic
#: electron-ion correction and electron-electron bremsstrahlung are included (a common textbook fit,
#: from memory; not checked against its source here): ~4% at 1e8 K, ~40% at 1e9 K. At a single
#: frequency with h nu << kT the correction is of the same order, kT / m_e c^2 (1.7% at 1e8 K).
RELATIVISTIC_CORRECTION = 4.4e-10
#: Temperatures (K) covered by the tracer's Gaunt factor tables; outside them the edge value is used.
GAUNT_TABLE_RANGE = (math.exp(LOG_T_MIN), math.exp(LOG_T_MAX))
#: A frequency below PLASMA_MARGIN times a cell's plasma frequency is "near" it: there the
#: refractive index sqrt(1 - (nu_p / nu)^2) is below 0.87 (Rybicki & Lightman 1979, sec. 8.1,
#: from memory), so straight rays and the vacuum source function are no longer a fair description.
PLASMA_MARGIN = 2.0
EMISSIVITY_UNIT = u.erg / (u.s * u.cm**3 * u.Hz * u.sr)


def check_temperature_range(temperature_k, what="temperature"):
    """Warn about temperatures above :data:`RELATIVISTIC_TEMPERATURE` and outside :data:`GAUNT_TABLE_RANGE`.

    The tracer's Gaunt factor tables span 1 K to 1e10 K; a cell outside is
    given the Gaunt factor at the table's edge, so its opacity and emission
    are approximate: a :class:`~rtrace.errors.GauntRangeWarning` counts the
    cells and gives the extremes. Cells from 1e8 K get a
    :class:`~rtrace.errors.RelativisticWarning` (:func:`warn_relativistic`).
    """
    t = np.asarray(temperature_k)
    n_hot = int(np.count_nonzero(t >= RELATIVISTIC_TEMPERATURE))
    warn_relativistic(n_hot, what, float(np.nanmax(t)) if n_hot else None)
    lo, hi = GAUNT_TABLE_RANGE
    n_cold = int(np.count_nonzero(t < lo))
    n_hot = int(np.count_nonzero(t > hi))
    if n_cold or n_hot:
        parts = []
        if n_cold:
            parts.append(f"{n_cold} below {lo:.3g} K (lowest {float(t.min()):.3g} K)")
        if n_hot:
            parts.append(f"{n_hot} above {hi:.3g} K (highest {float(t.max()):.3g} K)")
        warn_user(
            f"{what}: {n_cold + n_hot} of {t.size} cell(s) lie outside the Gaunt factor table "
            f"({lo:.3g} K to {hi:.3g} K): {'; '.join(parts)}. The tracer uses the Gaunt factor at the "
            "table's edge there, so their optical depth and emission are approximate (off by several "
            "percent a decade beyond the edge)",
            GauntRangeWarning,
        )


def plasma_frequency_cgs(ne):
    """Electron plasma frequency in Hz for ``ne`` in cm^-3.

    ``nu_p = sqrt(e^2 n_e / (pi m_e))`` (Gaussian units), about
    ``8.98 kHz sqrt(n_e / cm^-3)`` (Rybicki & Lightman 1979, sec. 8.1, from
    memory). Below it an electromagnetic wave does not propagate through
    the plasma.
    """
    return np.sqrt(E_CHARGE**2 * np.asarray(ne, float) / (math.pi * M_E))


def _density_at_plasma_frequency(nu):
    """Electron density (cm^-3) whose plasma frequency is ``nu`` Hz."""
    return math.pi * M_E * nu**2 / E_CHARGE**2


def check_plasma_frequency(nu, densities=(), largest=None):
    """Warn when a traced frequency lies near or below the plasma frequency of some cells.

    Parameters
    ----------
    nu : array_like
        Traced frequencies in Hz.
    densities : iterable of ndarray
        Electron density arrays (cm^-3) to count cells in (may be empty).
    largest : float, optional
        The highest electron density when the arrays are not at hand (a
        file-backed snapshot's recorded range); cells are then not counted.

    Returns
    -------
    int
        Cells where the lowest frequency is at or below the local plasma
        frequency (0 when nothing was counted).

    Notes
    -----
    Free-free transfer below the plasma frequency is meaningless: the wave
    is evanescent there, and near it (within :data:`PLASMA_MARGIN`) the
    refractive index departs from 1 (Rybicki & Lightman 1979, sec. 8.1, from
    memory). The warning names the lowest traced frequency, the highest
    plasma frequency and how many cells are affected.
    """
    nu_min = float(np.min(nu))
    near = _density_at_plasma_frequency(nu_min / PLASMA_MARGIN)
    below = _density_at_plasma_frequency(nu_min)
    arrays = [np.asarray(a) for a in densities]
    top = max(
        [float(a.max()) for a in arrays if a.size] + ([float(largest)] if largest is not None else []), default=0.0
    )
    if not top >= near:
        return 0
    nu_p = float(plasma_frequency_cgs(top))
    if arrays:
        total = sum(a.size for a in arrays)
        n_near = sum(int(np.count_nonzero(a >= near)) for a in arrays)
        n_below = sum(int(np.count_nonzero(a >= below)) for a in arrays)
        where = (
            f"{n_below} of {total} cells have a plasma frequency at or above it and {n_near} lie within a "
            f"factor {PLASMA_MARGIN:g} of it"
        )
    else:
        n_below = 0
        where = "cells of the snapshot (not counted: file-backed) reach it"
    warn_user(
        f"frequencies: the lowest traced frequency, {nu_min:.4g} Hz, is near or below the local plasma "
        f"frequency nu_p = 8.98 kHz sqrt(n_e / cm^-3): {where} (highest nu_p {nu_p:.4g} Hz, where n_e = "
        f"{top:.4g} cm^-3). Radiation below nu_p does not propagate and near it is refracted; the "
        "free-free transfer traced there is not meaningful"
    )
    return n_below


def warn_relativistic(n_hot, what="temperature", hottest=None):
    """Warn that ``n_hot`` cells lie above :data:`RELATIVISTIC_TEMPERATURE` (nothing if none).

    The message gives the size of what is neglected (:data:`RELATIVISTIC_CORRECTION`)
    at 1e8 K and, when ``hottest`` (K) is given, at the hottest cell.
    """
    if n_hot:
        at = ""
        if hottest is not None and math.isfinite(hottest):
            at = f"; about {100 * RELATIVISTIC_CORRECTION * hottest:.2g}% at the hottest cell ({hottest:.3g} K)"
        warn_user(
            f"{what}: {n_hot} cell(s) at or above {RELATIVISTIC_TEMPERATURE:.0e} K, where relativistic "
            "corrections and electron-electron bremsstrahlung, both neglected here, change the free-free "
            f"emission by about {100 * RELATIVISTIC_CORRECTION * RELATIVISTIC_TEMPERATURE:.0f}% at 1e8 K and "
            f"{100 * RELATIVISTIC_CORRECTION * 1e9:.0f}% at 1e9 K (the factor 1 + 4.4e-10 T/K of the "
            f"frequency-integrated emission, from memory){at}",
            RelativisticWarning,
        )


def helium3_share(ne, ni):
    """He III share of the ion term, ``4 n_HeIII / sum Z^2 n_i = 2 (ni - ne) / ni``, clipped to [0, 1].

    For hydrogen-helium gas ``n_e = n_HII + n_HeII + 2 n_HeIII`` and the ion term is
    ``n_HII + n_HeII + 4 n_HeIII`` (the ``Z^2 n_i`` of R&L 1979 eq. 5.18b), so their difference is
    ``2 n_HeIII``. Zero where the ion term does not exceed ``n_e``.
    """
    ne = np.asarray(ne, float)
    ni = np.asarray(ni, float)
    with np.errstate(invalid="ignore", divide="ignore"):
        share = np.where(ni > ne, 2.0 * (ni - ne) / np.where(ni > 0, ni, 1.0), 0.0)
    return np.clip(share, 0.0, 1.0)


def _mixed_gaunt(nu, t, ne, ni):
    """Gaunt factor weighted over the ion term: Z = 1 for all but the He III share, Z = 2 for that."""
    share = helium3_share(ne, ni)
    g1 = gaunt_cgs(nu, t, 1)
    if not np.any(share > 0):
        return g1
    return g1 + share * (gaunt_cgs(nu, t, 2) - g1)


def absorption_cgs(nu, temperature, ne, ni):
    """alpha_nu in cm-1 for plain cgs arrays.

    Rybicki & Lightman (1979), eq. 5.18b, with the exact stimulated-emission
    factor ``1 - e^{-h nu/kT}`` (written ``-expm1(-u)``, exact for any u),
    and the Gaunt factor of each ion charge (:func:`helium3_share`).
    """
    nu = np.asarray(nu, float)
    t = np.asarray(temperature, float)
    x = H_OVER_K * nu / t
    return (
        ALPHA_FF_PREFACTOR
        * np.asarray(ne, float)
        * np.asarray(ni, float)
        / (np.sqrt(t) * nu**3)
        * -np.expm1(-x)
        * _mixed_gaunt(nu, t, ne, ni)
    )


def emission_cgs(nu, temperature, ne, ni):
    """j_nu in erg s-1 cm-3 Hz-1 sr-1 for plain cgs arrays.

    Rybicki & Lightman (1979), eq. 5.14b gives ``4 pi j_nu``; isotropic emission;
    Gaunt factor per ion charge as in :func:`absorption_cgs`.
    """
    nu = np.asarray(nu, float)
    t = np.asarray(temperature, float)
    x = H_OVER_K * nu / t
    return (
        EMISSIVITY_FF_PREFACTOR
        / (4.0 * np.pi)
        * np.asarray(ne, float)
        * np.asarray(ni, float)
        / np.sqrt(t)
        * np.exp(-x)
        * _mixed_gaunt(nu, t, ne, ni)
    )


def _checked(value, unit, name, positive, equivalencies=None):
    """``value`` in ``unit`` as a real float array; InputError naming ``name`` and counting bad entries."""
    q = u.Quantity(value)
    if not q.unit.is_equivalent(unit, equivalencies=equivalencies or []):
        raise InputError(f"{name}: expected units of {unit}, got '{q.unit}'")
    if np.iscomplexobj(q.value):
        raise InputError(f"{name}: complex values given; expected real numbers")
    arr = np.asarray(q.to_value(unit, equivalencies=equivalencies or []), float)
    with np.errstate(invalid="ignore"):
        bad = ~np.isfinite(arr) | ((arr <= 0) if positive else (arr < 0))
    n_bad = int(np.count_nonzero(bad))
    if n_bad:
        raise InputError(f"{name}: {n_bad} of {arr.size} value(s) are not finite or {'<= 0' if positive else '< 0'}")
    return arr


def _inputs(frequency, temperature, electron_density, ion_density):
    nu = _checked(frequency, u.Hz, "frequency", True, u.spectral())
    t = _checked(temperature, u.K, "temperature", True, u.temperature())
    ne = _checked(electron_density, u.cm**-3, "electron_density", False)
    ni = ne if ion_density is None else _checked(ion_density, u.cm**-3, "ion_density", False)
    n_hot = int(np.count_nonzero(t >= RELATIVISTIC_TEMPERATURE))
    warn_relativistic(n_hot, hottest=float(t.max()) if n_hot else None)  # no table here: no table warning
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
        Where it exceeds ``electron_density`` the excess is taken as doubly
        ionized helium (``2 n_HeIII``), whose share gets the Z = 2 Gaunt factor.

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
