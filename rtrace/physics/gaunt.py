"""Thermally averaged free-free Gaunt factor for a Maxwellian plasma.

Notation: ``u = h nu / k T``, ``gamma^2 = Z^2 Ry / k T`` and ``w = u * gamma``.

**What the package uses** (:func:`gaunt_cgs`): exact thermal averages of the
non-relativistic Sommerfeld (1931) Gaunt factor, computed with mpmath by
``tools/gaunt_table.py`` on a grid of step 0.1 decade in ``log10 u``
(1e-6 to 100) and ``log10 gamma^2`` (1e-6 to 1e6) and shipped in
``data/gaunt_sommerfeld_table.csv`` (its header gives the command), read
through a bicubic spline in ``(log10 u, log10 gamma^2)``. Against exact values
at random points off the nodes and against the independent quadrature of
``tools/gaunt_sommerfeld.py`` (``tests/data``) the spline errs by less than
1e-4 relative (README, "Gaunt factor accuracy", gives the measured figures).
Beyond the table the edge value is continued by the change of the analytic
form below, which is exact in the soft-photon limits (``u < 1e-6``).

**The analytic form** (:func:`analytic_gaunt`) is the sum of three pieces:

1. the **quantum soft-photon term** ``(sqrt(3)/pi)[ln(4/u) - gamma_E]``, the
   radio limit of the Born approximation (``(sqrt(3)/pi) ln(4 kT / zeta h nu)``);
2. the **Coulomb soft-photon correction** ``D(gamma^2) = -(sqrt(3)/pi)(gamma_E + F(gamma^2))``
   with ``F = int_0^inf Re psi(1 + i gamma / sqrt(x)) e^{-x} dx``. In the
   soft-photon limit the Sommerfeld Gaunt factor of one electron is
   ``(sqrt(3)/pi)[ln(4E/h nu) - gamma_E - Re psi(1 + i eta)]`` (Weinberg 2019,
   Phys. Rev. D 99, 076018, from memory); its thermal average is 1 + 2, which
   reduces exactly to the quantum (Born) radio form for gamma -> 0 and to the
   classical radio form of Oster (1961) for gamma -> infinity;
3. the **classical finite-frequency correction** ``C(w) = gbar_cl(w) - gbar_cl,soft(w)``,
   where ``gbar_cl`` is the thermal average of the classical Coulomb-orbit
   Gaunt factor (Hankel functions of imaginary order), tabulated by
   ``tools/gaunt_classical.py`` in ``data/gaunt_classical.csv``. It carries
   the turnover toward the Kramers value 1 as the frequency rises.

It is exact in the radio limits and in the classical limit at any
frequency; elsewhere it is off by up to a few percent below ``u = 1`` and
by tens of percent on the Wien side (hence the exact table). For ``u > 1``
it is kept above ``f(u) g_B(u)``, the exact thermal average of the Born
Gaunt factor ``g_B(u) = (sqrt(3)/pi) e^{u/2} K_0(u/2)`` (Karzas & Latter
1961, ApJS 6, 167, from memory) weighted by ``f = u^2 / (1 + u^2)``.
Beyond ``u = 100`` (where the emission is below e^-100 of its radio value)
the continuation of the table by this form has not been verified.
"""

import functools
import math
import warnings
from importlib import resources

import astropy.units as u
import numpy as np
from scipy import special
from scipy.interpolate import CubicSpline, RectBivariateSpline

from ..errors import InputError
from .constants import EULER_GAMMA, H_OVER_K, K_B, RYDBERG_ENERGY

__all__ = [
    "gaunt_factor",
    "gaunt_cgs",
    "analytic_gaunt",
    "exact_table_range",
    "EXACT_TABLE",
    "born_thermal",
    "coulomb_correction",
    "classical_correction",
    "classical_radio_gaunt",
    "born_radio_gaunt",
    "log_temperature_table",
    "LOG_T_MIN",
    "LOG_T_MAX",
    "CHARGES",
]

SQRT3_PI = math.sqrt(3.0) / math.pi
RY_OVER_K = RYDBERG_ENERGY / K_B  # 1.5789e5 K

# Temperature range of the per-frequency lookup tables used by the kernels.
LOG_T_MIN = math.log(1.0)  # 1 K
LOG_T_MAX = math.log(1.0e10)  # 1e10 K, beyond the non-relativistic range
#: Ion charges the Gaunt factor is provided for: H II and He II (1), He III (2).
CHARGES = (1, 2)


def born_thermal(u_):
    """Thermal average of the Born Gaunt factor, ``(sqrt(3)/pi) e^{u/2} K_0(u/2)``.

    ``scipy.special.k0e`` is the exponentially scaled ``K_0``, so this is
    evaluated without overflow for any ``u > 0``.
    """
    return SQRT3_PI * special.k0e(0.5 * np.asarray(u_, float))


@functools.lru_cache(maxsize=1)
def _coulomb_table():
    """``F(gamma^2)`` on a log grid, by the trapezoidal rule in ``s = ln x``.

    The integrand ``Re psi(1 + i gamma e^{-s/2}) exp(s - e^s)`` is smooth and
    decays double-exponentially for s -> +inf and like ``|s| e^{s}`` for
    s -> -inf, so the trapezoidal rule converges spectrally.
    """
    log_g2 = np.linspace(math.log(1e-10), math.log(1e12), 441)
    # step 0.1 already agrees with step 0.005 to 1.3e-11 (spectral convergence) and costs 0.3 s
    s = np.arange(-45.0, 4.5, 0.1)
    weight = np.exp(s - np.exp(s)) * 0.1
    gamma = np.exp(0.5 * log_g2)[:, None]
    psi = special.psi(1.0 + 1j * gamma * np.exp(-0.5 * s)[None, :]).real
    return log_g2, CubicSpline(log_g2, psi @ weight)


def coulomb_correction(gamma2):
    """Soft-photon Coulomb correction ``D(gamma^2)`` (zero in the Born limit).

    Beyond the tabulated range the asymptotic forms are used:
    ``F -> -gamma_E`` (gamma -> 0) and ``F -> ln(gamma) + gamma_E/2 + 1/(12 gamma^2)``
    (gamma -> inf, from ``Re psi(1+iy) = ln y + 1/(12 y^2) + ...``,
    Abramowitz & Stegun 6.3.19).
    """
    log_g2 = np.log(np.asarray(gamma2, float))
    grid, spline = _coulomb_table()
    inner = spline(np.clip(log_g2, grid[0], grid[-1]))
    big = 0.5 * log_g2 + 0.5 * EULER_GAMMA + np.exp(-log_g2) / 12.0
    small = np.full_like(log_g2, -EULER_GAMMA)
    fval = np.where(log_g2 > grid[-1], big, np.where(log_g2 < grid[0], small, inner))
    return -SQRT3_PI * (EULER_GAMMA + fval)


@functools.lru_cache(maxsize=1)
def _classical_table():
    text = resources.files("rtrace.physics").joinpath("data/gaunt_classical.csv").read_text()
    rows = [line for line in text.splitlines() if line and not line.startswith("#")]
    data = np.array([[float(v) for v in line.split(",")] for line in rows[1:]])
    w, g = data[:, 0], data[:, 1]
    soft = SQRT3_PI * (np.log(4.0 / w) - 2.5 * EULER_GAMMA)
    return np.log(w), CubicSpline(np.log(w), g - soft), g[-1]


def classical_correction(w):
    """``C(w) = gbar_cl(w) - (sqrt(3)/pi)[ln(4/w) - 5 gamma_E / 2]``.

    Interpolated with a cubic spline in ``ln w``. Below the table the
    correction falls as ``w^{2/3}`` (slow electrons, which always see large
    ``x``, dominate it; the power is read off the table by
    ``tools/gaunt_classical.py``), so it is continued as
    ``C(w_min) (w / w_min)^{2/3}``; above the table ``gbar_cl`` is held at its
    last value, which is within 1e-3 of the Kramers plateau 1.
    """
    log_w = np.log(np.asarray(w, float))
    grid, spline, g_last = _classical_table()
    inner = spline(np.clip(log_w, grid[0], grid[-1]))
    low = float(spline(grid[0])) * np.exp((2.0 / 3.0) * (np.minimum(log_w, grid[0]) - grid[0]))
    high = g_last - SQRT3_PI * (math.log(4.0) - log_w - 2.5 * EULER_GAMMA)
    return np.where(log_w < grid[0], low, np.where(log_w > grid[-1], high, inner))


def analytic_gaunt(uu, gamma2):
    """The three-piece analytic evaluation (module docstring) at ``u = h nu / kT`` and ``gamma^2 = Z^2 Ry / kT``.

    Exact in the soft-photon limits (Born and classical) and the classical limit; used by
    :func:`gaunt_cgs` only to continue the exact table beyond its edges.
    """
    uu = np.asarray(uu, float)
    gamma2 = np.asarray(gamma2, float)
    w = uu * np.sqrt(gamma2)
    g = SQRT3_PI * (np.log(4.0 / uu) - EULER_GAMMA) + coulomb_correction(gamma2) + classical_correction(w)
    wien = uu > 1.0
    if np.any(wien):
        floor = uu**2 / (1.0 + uu**2) * born_thermal(uu)
        g = np.where(wien, np.maximum(g, floor), g)
    return g


#: Package data: exact thermal averages on a grid in (log10 u, log10 gamma^2), made by tools/gaunt_table.py.
EXACT_TABLE = "data/gaunt_sommerfeld_table.csv"


@functools.lru_cache(maxsize=1)
def _exact_table():
    """``(log10 u nodes, log10 gamma^2 nodes, bicubic spline of gbar)`` from :data:`EXACT_TABLE`."""
    text = resources.files("rtrace.physics").joinpath(EXACT_TABLE).read_text()
    rows = [line for line in text.splitlines() if line and not line.startswith("#")]
    data = np.array([[float(v) for v in line.split(",")[:3]] for line in rows[1:]])
    lu, lg = np.unique(data[:, 0]), np.unique(data[:, 1])
    order = np.lexsort((data[:, 1], data[:, 0]))
    if len(data) != lu.size * lg.size:
        raise RuntimeError(f"{EXACT_TABLE}: {len(data)} rows do not fill a {lu.size} x {lg.size} grid")
    grid = data[order, 2].reshape(lu.size, lg.size)
    return lu, lg, RectBivariateSpline(lu, lg, grid, kx=3, ky=3, s=0)


def exact_table_range():
    """``((log10 u min, max), (log10 gamma^2 min, max))`` covered by the exact table."""
    lu, lg, _ = _exact_table()
    return (float(lu[0]), float(lu[-1])), (float(lg[0]), float(lg[-1]))


def gaunt_cgs(nu, temperature, charge=1):
    """Gaunt factor for plain arrays: ``nu`` in Hz, ``temperature`` in K, ion ``charge`` Z.

    Inside the exact table (``1e-6 <= u <= 100``, ``1e-6 <= gamma^2 <= 1e6``) a
    bicubic spline in ``(log10 u, log10 gamma^2)`` of the exact thermal
    averages (:data:`EXACT_TABLE`); beyond it, the table's edge value plus
    the change of :func:`analytic_gaunt` from the edge, which continues the
    soft-photon limits (``u < 1e-6``) exactly. Z enters only through
    ``gamma^2 = Z^2 Ry / kT`` (``u = h nu / kT`` does not depend on it), so
    ``gbar(nu, T, Z) = gbar(nu / Z^2, T / Z^2, 1)``.
    """
    nu = np.asarray(nu, float)
    t = np.asarray(temperature, float)
    uu = H_OVER_K * nu / t
    gamma2 = charge * charge * RY_OVER_K / t
    uu, gamma2 = np.broadcast_arrays(uu, gamma2)
    shape = uu.shape
    lu_nodes, lg_nodes, spline = _exact_table()
    lu, lg = np.log10(uu).ravel(), np.log10(gamma2).ravel()
    lu_c = np.clip(lu, lu_nodes[0], lu_nodes[-1])
    lg_c = np.clip(lg, lg_nodes[0], lg_nodes[-1])
    g = spline.ev(lu_c, lg_c)
    outside = (lu != lu_c) | (lg != lg_c)
    if np.any(outside):
        o = outside
        g[o] += analytic_gaunt(10.0 ** lu[o], 10.0 ** lg[o]) - analytic_gaunt(10.0 ** lu_c[o], 10.0 ** lg_c[o])
    return g.reshape(shape)


def _as_cgs(value, unit, equivalencies):
    if isinstance(value, u.Quantity):
        return np.asarray(value.to_value(unit, equivalencies=equivalencies), float)
    return np.asarray(value, float)


def _check_charge(charge):
    if isinstance(charge, (bool, np.bool_)) or charge not in CHARGES:
        raise InputError(
            f"charge: the Gaunt factor is provided for ion charges {CHARGES} "
            f"(H II and He II: 1, He III: 2), got {charge!r}"
        )
    return int(charge)


def gaunt_factor(frequency, temperature, charge=1, *, Z=None):
    """Thermally averaged free-free Gaunt factor ``gbar_ff(nu, T)`` for ions of charge ``charge``.

    Parameters
    ----------
    frequency : `~astropy.units.Quantity` or array_like
        Frequency; plain numbers are taken to be in Hz.
    temperature : `~astropy.units.Quantity` or array_like
        Electron temperature; plain numbers are taken to be in K.
    charge : {1, 2}, optional
        Ion charge Z: 1 for H II and He II, 2 for He III. It enters through
        ``gamma^2 = Z^2 Ry / kT``.
    Z : int, optional
        Deprecated spelling of ``charge`` (DeprecationWarning).

    Returns
    -------
    numpy.ndarray
        Dimensionless Gaunt factor, broadcast over the inputs.

    Raises
    ------
    InputError
        A charge other than 1 or 2.
    """
    if Z is not None:
        warnings.warn("gaunt_factor: the keyword Z= is deprecated; use charge=", DeprecationWarning, stacklevel=2)
        charge = Z
    charge = _check_charge(charge)
    nu = _as_cgs(frequency, u.Hz, u.spectral())
    t = _as_cgs(temperature, u.K, u.temperature())
    return gaunt_cgs(nu, t, charge)


def classical_radio_gaunt(nu, temperature, Z=1):
    """Classical radio form (Oster 1961, Rev. Mod. Phys. 33, 525; Spitzer 1978).

    ``(sqrt(3)/pi)[ln((2kT)^{3/2} / (pi Z e^2 nu m_e^{1/2})) - 5 gamma_E / 2]``,
    which equals ``(sqrt(3)/pi)[ln(4/w) - 5 gamma_E/2]``. Valid for
    ``h nu << kT`` and ``T << 1.6e5 Z^2 K``. ``nu`` in Hz, ``temperature`` in K.
    """
    from .constants import E_CHARGE, M_E

    t = np.asarray(temperature, float)
    arg = (2.0 * K_B * t) ** 1.5 / (math.pi * Z * E_CHARGE**2 * np.asarray(nu, float) * math.sqrt(M_E))
    return SQRT3_PI * (np.log(arg) - 2.5 * EULER_GAMMA)


def born_radio_gaunt(nu, temperature):
    """Quantum (Born) radio form ``(sqrt(3)/pi) ln(4 kT / (zeta h nu))``, ``zeta = e^gamma_E``.

    Valid for ``h nu << kT`` and ``T >> 1.6e5 Z^2 K``. ``nu`` in Hz, ``temperature`` in K.
    """
    uu = H_OVER_K * np.asarray(nu, float) / np.asarray(temperature, float)
    return SQRT3_PI * (np.log(4.0 / uu) - EULER_GAMMA)


def log_temperature_table(nu, n_table=4097, charge=1):
    """Gaunt factor for each frequency on a uniform grid in ``ln T`` (1 K to 1e10 K).

    The kernels interpolate this table linearly in ``ln T``; the Gaunt factor
    is close to linear in ``ln T`` so the interpolation error is below 5e-7
    where ``h nu < kT`` and below 1.5e-5 on the Wien side (``u`` = 1 to 100;
    measured against :func:`gaunt_cgs` at 4000 random temperatures for 46
    frequencies from 10 MHz to 1e16 Hz).
    Each frequency's row is computed once per process and kept (a few hundred
    most recent frequencies), so repeated traces at the same frequencies do
    not evaluate the Gaunt factor again.

    Parameters
    ----------
    nu : array_like
        Frequencies in Hz.
    n_table : int, optional
        Nodes of the ``ln T`` grid.
    charge : {1, 2}, optional
        Ion charge Z.

    Returns
    -------
    log_t0, dlog_t : float
        First node and spacing of the grid in ``ln(T / K)``.
    table : ndarray, shape (nfreq, n_table)
    """
    charge = _check_charge(charge)
    log_t = np.linspace(LOG_T_MIN, LOG_T_MAX, n_table)
    nu = np.atleast_1d(np.asarray(nu, float))
    table = np.empty((nu.size, n_table))
    for f, nu_f in enumerate(nu.ravel()):
        table[f] = _table_row(float(nu_f), n_table, charge)
    return LOG_T_MIN, log_t[1] - log_t[0], table


@functools.lru_cache(maxsize=512)
def _table_row(nu, n_table, charge=1):
    """One frequency's row of :func:`log_temperature_table` (read-only: it is shared)."""
    row = gaunt_cgs(nu, np.exp(np.linspace(LOG_T_MIN, LOG_T_MAX, n_table)), charge)
    row.flags.writeable = False
    return row
